package status

import (
	"context"
	"crypto/sha256"
	"embed"
	"encoding/hex"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"net"
	"net/http"
	"path"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"

	"glowgate/bus/modbus"
)

// Options configure a Server.
type Options struct {
	// Listen is the TCP address to serve on, e.g. 127.0.0.1:8080; port 0
	// picks a free one (see Addr). Empty: New binds nothing and Run fails;
	// the Server is then used through Handler only.
	Listen string
	// Token is the operator token that operator actions need. Empty: the
	// page is read-only and every action is refused.
	Token   string
	Gateway string // the gateway's name, shown on the page
	Version string // glowgate's version, shown and in glowgate_build_info
	Logger  *slog.Logger
	// Registry receives the Server's metrics and is what /metrics serves
	// (with whatever else the daemon registered in it). Nil: a registry of
	// the Server's own.
	Registry *prometheus.Registry
	// Act carries out an operator action; its error is shown to the
	// operator. Nil: the gateway takes no actions (the page is read-only).
	Act func(ctx context.Context, a Action) error
	Now func() time.Time // nil: time.Now
	// MaxOutboxAge is the age of the oldest unpublished message above which
	// /healthz reports degraded; zero or less: DefaultMaxOutboxAge.
	MaxOutboxAge time.Duration
}

// DefaultMaxOutboxAge is Options.MaxOutboxAge's default.
const DefaultMaxOutboxAge = 5 * time.Minute

// Action is an operator's request about one alarm.
type Action struct {
	Kind  string    // ActionAcknowledge, ActionShelve or ActionUnshelve
	Head  string    // the alarm's head
	Alarm string    // the alarm's name
	By    string    // who asked: the name the operator typed, or "operator"
	Until time.Time // end of the shelving (ActionShelve only)
}

// Action kinds.
const (
	ActionAcknowledge = "acknowledge"
	ActionShelve      = "shelve"
	ActionUnshelve    = "unshelve"
)

// Server is the status HTTP server. Create it with New.
type Server struct {
	glow     glowTable
	o        Options
	log      *slog.Logger
	now      func() time.Time
	registry *prometheus.Registry
	tokenSum [sha256.Size]byte
	handler  http.Handler
	assets   map[string]asset
	ln       net.Listener
	stop     chan struct{} // closed when Run begins to shut down
	stopOnce sync.Once

	mu           sync.Mutex
	heads        map[string]*headState
	order        []string
	headsJSON    []byte
	headsVer     uint64
	alarms       []AlarmView
	alarmsJSON   []byte
	alarmsVer    uint64
	health       Health
	healthSet    bool
	healthVer    uint64
	lineStats    func() []modbus.LineStats
	ring         [ringSize]event
	next         uint64        // sequence number of the next event
	wake         chan struct{} // closed and replaced when an event arrives and someone waits
	waiting      bool
	clients      int
	dropHeadOnce sync.Once

	rates lineRates
}

// asset is an embedded file of the page.
type asset struct {
	data  []byte
	ctype string
	etag  string
}

//go:embed web
var webFS embed.FS

// New returns a Server and, when o.Listen is set, binds its listener (so
// Addr is known at once and a port in use is an error here). It
// registers the Server's collector in o.Registry.
func New(o Options) (*Server, error) {
	s := &Server{
		o:     o,
		log:   o.Logger,
		now:   o.Now,
		stop:  make(chan struct{}),
		heads: map[string]*headState{},
		wake:  make(chan struct{}),
	}
	if s.log == nil {
		s.log = slog.New(slog.DiscardHandler)
	}
	if s.now == nil {
		s.now = time.Now
	}
	if s.o.MaxOutboxAge <= 0 {
		s.o.MaxOutboxAge = DefaultMaxOutboxAge
	}
	s.tokenSum = sha256.Sum256([]byte(o.Token))
	s.registry = o.Registry
	if s.registry == nil {
		s.registry = prometheus.NewRegistry()
	}
	assets, err := loadAssets()
	if err != nil {
		return nil, fmt.Errorf("status: embedded page: %w", err)
	}
	s.assets = assets
	s.headsJSON = []byte("[]")
	s.alarmsJSON = []byte("[]")
	s.handler = s.routes()
	if o.Listen != "" {
		ln, err := net.Listen("tcp", o.Listen)
		if err != nil {
			return nil, fmt.Errorf("status: listen on %s: %w", o.Listen, err)
		}
		s.ln = ln
	}
	// Registered last, so that a failed New leaves the registry as it was.
	if err := s.registry.Register(newCollector(s)); err != nil {
		s.Close()
		return nil, fmt.Errorf("status: register metrics: %w", err)
	}
	return s, nil
}

// Addr is the address the Server listens on (with the port chosen when
// Options.Listen asked for port 0), or "" without a listener.
func (s *Server) Addr() string {
	if s.ln == nil {
		return ""
	}
	return s.ln.Addr().String()
}

// Handler is the Server's HTTP handler, for tests and for mounting it in
// another server. Live streams end when their request's context ends, or
// when Run shuts down.
func (s *Server) Handler() http.Handler { return s.handler }

// Run serves on the listener New bound until ctx is done, then shuts down
// gracefully: live streams end at once, other requests get up to five
// seconds to finish. It closes the listener, so it can run only once. It
// returns nil after a shutdown for ctx, or the error that stopped serving.
func (s *Server) Run(ctx context.Context) error {
	if s.ln == nil {
		return errors.New("status: run: no listener (Options.Listen is empty)")
	}
	srv := &http.Server{
		Handler:           s.handler,
		ReadHeaderTimeout: 10 * time.Second,
		IdleTimeout:       2 * time.Minute,
		ErrorLog:          slog.NewLogLogger(s.log.Handler(), slog.LevelDebug),
	}
	errc := make(chan error, 1)
	go func() { errc <- srv.Serve(s.ln) }()
	s.log.Info("status page serving", "addr", s.Addr())
	select {
	case err := <-errc:
		s.closeStreams()
		return fmt.Errorf("status: serve: %w", err)
	case <-ctx.Done():
	}
	s.closeStreams()
	sctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 5*time.Second)
	defer cancel()
	err := srv.Shutdown(sctx)
	if serr := <-errc; !errors.Is(serr, http.ErrServerClosed) && err == nil {
		err = serr
	}
	if err != nil {
		return fmt.Errorf("status: shut down: %w", err)
	}
	return nil
}

// Close releases the listener of a Server whose Run was never called. It
// is not needed after Run.
func (s *Server) Close() error {
	s.closeStreams()
	if s.ln == nil {
		return nil
	}
	err := s.ln.Close()
	if errors.Is(err, net.ErrClosed) {
		return nil
	}
	return err
}

func (s *Server) closeStreams() { s.stopOnce.Do(func() { close(s.stop) }) }

func (s *Server) routes() http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /{$}", s.serveAsset("index.html"))
	for name := range s.assets {
		if name != "index.html" {
			mux.HandleFunc("GET /static/"+name, s.serveAsset(name))
		}
	}
	mux.HandleFunc("GET /api/state", s.serveState)
	mux.HandleFunc("GET /api/history", s.serveHistory)
	mux.HandleFunc("GET /api/events", s.serveEvents)
	mux.HandleFunc("POST /api/session", s.serveSession)
	mux.HandleFunc("POST /api/action", s.serveAction)
	mux.Handle("GET /metrics", promhttp.HandlerFor(s.registry, promhttp.HandlerOpts{
		ErrorLog:      slog.NewLogLogger(s.log.Handler(), slog.LevelWarn),
		ErrorHandling: promhttp.ContinueOnError,
	}))
	mux.HandleFunc("GET /healthz", s.serveHealthz)
	return securityHeaders(mux)
}

// securityHeaders sets the headers every answer carries: a content
// security policy that allows only this origin's own script, style and
// connections (and no framing), no MIME sniffing, no referrer.
func securityHeaders(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		h := w.Header()
		h.Set("Content-Security-Policy", "default-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
		h.Set("X-Content-Type-Options", "nosniff")
		h.Set("Referrer-Policy", "no-referrer")
		h.Set("X-Frame-Options", "DENY")
		next.ServeHTTP(w, r)
	})
}

func loadAssets() (map[string]asset, error) {
	sub, err := fs.Sub(webFS, "web")
	if err != nil {
		return nil, err
	}
	out := map[string]asset{}
	err = fs.WalkDir(sub, ".", func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		data, err := fs.ReadFile(sub, p)
		if err != nil {
			return err
		}
		sum := sha256.Sum256(data)
		out[p] = asset{data: data, ctype: contentType(p), etag: `"` + hex.EncodeToString(sum[:8]) + `"`}
		return nil
	})
	if _, ok := out["index.html"]; err == nil && !ok {
		err = errors.New("index.html missing")
	}
	return out, err
}

func contentType(name string) string {
	switch path.Ext(name) {
	case ".html":
		return "text/html; charset=utf-8"
	case ".css":
		return "text/css; charset=utf-8"
	case ".js":
		return "text/javascript; charset=utf-8"
	case ".svg":
		return "image/svg+xml"
	}
	return "application/octet-stream"
}

// serveAsset serves an embedded file, revalidated by ETag on every load
// (the page changes with the binary).
func (s *Server) serveAsset(name string) http.HandlerFunc {
	a := s.assets[name]
	return func(w http.ResponseWriter, r *http.Request) {
		h := w.Header()
		h.Set("Content-Type", a.ctype)
		h.Set("Cache-Control", "no-cache")
		h.Set("ETag", a.etag)
		if match := r.Header.Get("If-None-Match"); match != "" && strings.Contains(match, a.etag) {
			w.WriteHeader(http.StatusNotModified)
			return
		}
		w.Write(a.data)
	}
}

// pageWeight is the total size in bytes of the page's embedded files.
func (s *Server) pageWeight() int {
	n := 0
	for _, a := range s.assets {
		n += len(a.data)
	}
	return n
}
