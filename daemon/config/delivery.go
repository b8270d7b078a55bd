package config

import (
	"net"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"time"
)

// Defaults of delivery.
const (
	defaultOutboxEntries  = 1000000
	defaultCommitInterval = 50 * time.Millisecond
	defaultReplayWindow   = 30 * time.Second
)

// Outbox bounds the durable outbox in the state directory.
type Outbox struct {
	MaxEntries     int
	CommitInterval time.Duration // group commit with fsync, at most this often
}

// TLS is how the gateway talks TLS to its brokers.
type TLS struct {
	CAFile, CertFile, KeyFile string // PEM files, relative to the configuration's folder
	ServerName                string
}

// Commands configures the operator commands on <root>/<gateway>/cmd.
type Commands struct {
	Enabled      bool
	Secret       []byte        // HMAC-SHA256 key; nil: commands need no signature
	ReplayWindow time.Duration // signed commands older or newer than this are refused
}

// delivery decodes the durable outbox and security settings of mqtt.
func (d *decoder) delivery(f *fields, m *MQTT) {
	m.Outbox = Outbox{MaxEntries: defaultOutboxEntries, CommitInterval: defaultCommitInterval}
	if ov := f.get("outbox"); ov.n != nil {
		of := d.fields(ov, "max_entries", "commit_interval")
		if v := of.get("max_entries"); v.n != nil {
			if x, ok := d.integer(v, 1000, 100000000); ok {
				m.Outbox.MaxEntries = int(x)
			}
		}
		if v := of.get("commit_interval"); v.n != nil {
			if x, ok := d.positiveDuration(v); ok {
				m.Outbox.CommitInterval = x
			}
		}
	}
	if tv := f.get("tls"); tv.n != nil {
		tf := d.fields(tv, "ca_file", "cert_file", "key_file", "server_name")
		t := &TLS{}
		for key, dst := range map[string]*string{"ca_file": &t.CAFile, "cert_file": &t.CertFile, "key_file": &t.KeyFile} {
			if v := tf.get(key); v.n != nil {
				if s, ok := d.str(v); ok {
					*dst = d.relative(s)
					if _, err := os.Stat(*dst); err != nil {
						d.errorf(v, "%v", err)
					}
				}
			}
		}
		if v := tf.get("server_name"); v.n != nil {
			if s, ok := d.str(v); ok {
				t.ServerName = s
			}
		}
		if (t.CertFile == "") != (t.KeyFile == "") && !d.failed[tv.path] {
			d.errorf(tv, "cert_file and key_file go together")
		}
		m.TLS = t
	}
	pf, pe := f.get("password_file"), f.get("password_env")
	switch {
	case pf.n != nil && pe.n != nil:
		d.errorf(pe, "give password_file or password_env, not both")
	case pf.n != nil:
		if s, ok := d.str(pf); ok {
			b, err := os.ReadFile(d.relative(s))
			if err != nil {
				d.errorf(pf, "%v", err)
			} else {
				m.Password = strings.TrimRight(string(b), "\r\n")
			}
		}
	case pe.n != nil:
		if s, ok := d.str(pe); ok {
			v, set := os.LookupEnv(s)
			if !set {
				d.errorf(pe, "environment variable %s is not set", s)
			}
			m.Password = v
		}
	}
	if v := f.get("allow_plaintext_password"); v.n != nil {
		if b, ok := d.boolean(v); ok {
			m.AllowPlaintextPassword = b
		}
	}
	if m.Password != "" && m.Username == "" && !d.failed[f.v.path] {
		d.errorf(f.v, "a password needs a username")
	}
	if m.Password != "" && m.TLS == nil && !m.AllowPlaintextPassword {
		for i, b := range m.Brokers {
			if host, plain := plaintextHost(b); plain && !isLoopback(host) {
				p := index(join(f.v.path, "brokers"), i)
				d.errorAt(d.line(p), p, "the password would cross the network in plain text to %s (use tls, a loopback broker, or allow_plaintext_password: true)", host)
			}
		}
	}
}

// commands decodes the commands section.
func (d *decoder) commands(v val) Commands {
	c := Commands{Enabled: true, ReplayWindow: defaultReplayWindow}
	if v.n == nil {
		return c
	}
	f := d.fields(v, "enabled", "secret_file", "secret_env", "replay_window")
	if ev := f.get("enabled"); ev.n != nil {
		if b, ok := d.boolean(ev); ok {
			c.Enabled = b
		}
	}
	sf, se := f.get("secret_file"), f.get("secret_env")
	switch {
	case sf.n != nil && se.n != nil:
		d.errorf(se, "give secret_file or secret_env, not both")
	case sf.n != nil:
		if s, ok := d.str(sf); ok {
			b, err := os.ReadFile(d.relative(s))
			switch {
			case err != nil:
				d.errorf(sf, "%v", err)
			case len(strings.TrimSpace(string(b))) < 16:
				d.errorf(sf, "the secret in %s is shorter than 16 characters", s)
			default:
				c.Secret = []byte(strings.TrimSpace(string(b)))
			}
		}
	case se.n != nil:
		if s, ok := d.str(se); ok {
			val, set := os.LookupEnv(s)
			switch {
			case !set:
				d.errorf(se, "environment variable %s is not set", s)
			case len(val) < 16:
				d.errorf(se, "the secret in %s is shorter than 16 characters", s)
			default:
				c.Secret = []byte(val)
			}
		}
	}
	if rv := f.get("replay_window"); rv.n != nil {
		if x, ok := d.positiveDuration(rv); ok {
			c.ReplayWindow = x
		}
	}
	return c
}

// stateDir decodes the state directory: where the durable outbox and
// the alarm states live.
func (d *decoder) stateDir(v val) string {
	if v.n == nil {
		return ""
	}
	s, ok := d.str(v)
	if !ok || s == "" {
		return ""
	}
	return d.relative(s)
}

// relative resolves a file named in the configuration against the
// configuration's folder.
func (d *decoder) relative(name string) string {
	if filepath.IsAbs(name) {
		return name
	}
	return filepath.Join(filepath.Dir(d.file), name)
}

// plaintextHost returns a broker URL's host and whether the scheme sends
// passwords in the clear.
func plaintextHost(raw string) (string, bool) {
	u, err := url.Parse(raw)
	if err != nil {
		return "", false
	}
	switch u.Scheme {
	case "tcp", "mqtt", "ws":
		return u.Hostname(), true
	}
	return u.Hostname(), false
}

func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// defaultHTTPListen is where the status page, /metrics and /healthz are
// served unless the configuration says otherwise.
const defaultHTTPListen = "127.0.0.1:8080"

// HTTP configures the status page, /metrics and /healthz.
type HTTP struct {
	Listen string // host:port; empty: off
	Token  string // operator token for acknowledge and shelve; empty: the page is read-only
}

// http decodes the http section.
func (d *decoder) http(v val) HTTP {
	h := HTTP{Listen: defaultHTTPListen}
	if v.n == nil {
		return h
	}
	f := d.fields(v, "listen", "token_file", "token_env")
	if lv := f.get("listen"); lv.n != nil {
		if s, ok := d.str(lv); ok {
			if s != "" {
				if err := checkAddress(s); err != nil {
					d.errorf(lv, "%v", err)
				}
			}
			h.Listen = s
		}
	}
	tf, te := f.get("token_file"), f.get("token_env")
	switch {
	case tf.n != nil && te.n != nil:
		d.errorf(te, "give token_file or token_env, not both")
	case tf.n != nil:
		if s, ok := d.str(tf); ok {
			b, err := os.ReadFile(d.relative(s))
			if err != nil {
				d.errorf(tf, "%v", err)
			} else {
				h.Token = strings.TrimSpace(string(b))
			}
		}
	case te.n != nil:
		if s, ok := d.str(te); ok {
			val, set := os.LookupEnv(s)
			if !set {
				d.errorf(te, "environment variable %s is not set", s)
			}
			h.Token = val
		}
	}
	if h.Token != "" && len(h.Token) < 16 {
		d.errorf(v, "the operator token is shorter than 16 characters")
	}
	return h
}
