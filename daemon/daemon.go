// Package daemon is glowgate's composition root: it turns a configuration
// into line pollers, a conversion pipeline and a publisher, runs them, and
// reloads or stops them.
//
// Data flow for each poll:
//
//	line owner (one goroutine per TCP endpoint or RS-485 line) -> register
//	  blocks -> channel signals, status word, extras -> convert.Chain
//	  -> quality and flags -> Reading -> publisher queue
//
// Polling never waits for the broker: the publisher's queue takes a
// reading or counts it dropped.
package daemon

import (
	"context"
	"crypto/tls"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"golang.org/x/sync/errgroup"

	"glowgate/alarms"
	"glowgate/bus/modbus"
	"glowgate/bus/mqtt"
	"glowgate/convert"
	"glowgate/daemon/config"
	"glowgate/daemon/status"
)

// Options configure a Daemon.
type Options struct {
	Config *config.Config
	// Load re-reads the configuration whenever a value arrives on Reload
	// (SIGHUP, as the command wires it); nil disables reload.
	Load   func() (*config.Config, error)
	Reload <-chan os.Signal
	// Brokers, when not empty, replace the configured broker list.
	Brokers []string
	// StateDir, when not empty, replaces the configured state directory
	// (the durable outbox lives there).
	StateDir string
	// HTTPListen, when not empty, replaces the configured address of the
	// status page.
	HTTPListen string
	Logger     *slog.Logger
	Version    string
	// Now is the clock for acquisition times; nil means time.Now.
	Now func() time.Time
}

// Daemon polls the configured heads and publishes their readings.
type Daemon struct {
	opts  Options
	log   *slog.Logger
	now   func() time.Time
	seqMu sync.Mutex
	seq   atomic.Uint64

	mu     sync.Mutex
	cfg    *config.Config
	heads  []*head
	latest map[string]mqtt.Reading
	pub    *mqtt.Publisher
	outbox *mqtt.Outbox // nil: no state directory, readings wait in memory
	// savedAlarms holds every head's latest alarm states, as written to
	// the state directory.
	savedAlarms map[string][]alarms.Saved
	gate        *commandGate   // nil: commands are off
	status      *status.Server // nil: no status page
	floodMu     sync.Mutex
	flood       alarms.Flood   // annunciations and activations, for flood and chatter
	lines       []*modbus.Line // the running line owners
}

// New checks that every head of the configuration can be built.
func New(o Options) (*Daemon, error) {
	if o.Config == nil {
		return nil, errors.New("daemon: no configuration")
	}
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	heads, err := buildHeads(o.Config)
	if err != nil {
		return nil, err
	}
	d := &Daemon{opts: o, log: o.Logger, now: o.Now, cfg: o.Config, heads: heads, latest: map[string]mqtt.Reading{}}
	d.savedAlarms = d.loadAlarms()
	if d.savedAlarms == nil {
		d.savedAlarms = map[string][]alarms.Saved{}
	}
	if err := d.attachAlarms(heads, nil); err != nil {
		return nil, err
	}
	if c := o.Config.Commands; c.Enabled {
		d.gate = newCommandGate(c.Secret, c.ReplayWindow)
	}
	// Sequence numbers start at the wall clock in microseconds, so that
	// they keep increasing across restarts as long as the clock does and
	// fewer than a million readings a second are made.
	d.seq.Store(uint64(o.Now().UnixMicro()))
	return d, nil
}

// attachAlarms gives each head its alarms: carried over from the head of
// the same name in prev (the heads before a reload), else in the states
// last saved.
func (d *Daemon) attachAlarms(heads, prev []*head) error {
	for _, h := range heads {
		d.mu.Lock()
		saved := d.savedAlarms[h.cfg.Name]
		d.mu.Unlock()
		var carried *headAlarms
		if i := slices.IndexFunc(prev, func(p *head) bool { return p.cfg.Name == h.cfg.Name }); i >= 0 {
			carried = prev[i].alarms
		}
		ha, err := newHeadAlarms(h.cfg, saved, carried)
		if err != nil {
			return fmt.Errorf("head %s: %w", h.cfg.Name, err)
		}
		h.alarms = ha
	}
	return nil
}

func buildHeads(cfg *config.Config) ([]*head, error) {
	heads := make([]*head, 0, len(cfg.Heads))
	crit := criticalTables{}
	for _, hc := range cfg.Heads {
		h, err := newHead(cfg, hc, crit)
		if err != nil {
			return nil, err
		}
		heads = append(heads, h)
	}
	return heads, nil
}

// Run polls and publishes until ctx is done, then stops the pollers,
// flushes the publisher (bounded), publishes the offline state and
// returns. A reload that fails keeps the running configuration.
func (d *Daemon) Run(ctx context.Context) error {
	if err := d.openOutbox(); err != nil {
		return err
	}
	defer d.closeOutbox()
	// The publisher outlives the pollers: it flushes after they stop.
	pubCtx := context.WithoutCancel(ctx)
	stopPub, err := d.startPublisher(pubCtx)
	if err != nil {
		return err
	}
	defer func() { stopPub() }()
	d.publishAllAlarmStates()
	stopStatus := d.startStatus(ctx)
	defer stopStatus()
	tickDone := make(chan struct{})
	tickCtx, stopTicking := context.WithCancel(ctx)
	go func() {
		defer close(tickDone)
		d.runAlarmTicker(tickCtx)
	}()
	defer func() {
		stopTicking()
		<-tickDone
	}()
	for {
		pollCtx, stopPolling := context.WithCancel(ctx)
		polled := make(chan error, 1)
		go func() { polled <- d.poll(pollCtx) }()
		select {
		case <-ctx.Done():
			stopPolling()
			<-polled
			return nil
		case err := <-polled:
			stopPolling()
			return err
		case <-d.opts.Reload:
			stopPolling()
			<-polled
			applied, newPublisher := d.reload()
			if newPublisher {
				// A new gateway or broker identity needs a new publisher.
				stopPub()
				if stopPub, err = d.startPublisher(pubCtx); err != nil {
					stopPub = func() {}
					return err
				}
			}
			if applied {
				// The alarms were rebuilt (carried over or restored):
				// their retained states, under the rules now configured.
				d.publishAllAlarmStates()
			}
		}
	}
}

// openOutbox opens the durable outbox in the state directory, when there
// is one. Readings appended to it survive a crash and a restart, and
// their sequence numbers never go back.
func (d *Daemon) openOutbox() error {
	cfg := d.config()
	dir := cfg.StateDir
	if d.opts.StateDir != "" {
		dir = d.opts.StateDir
	}
	if dir == "" {
		d.log.Warn("no state directory: readings wait in memory while the broker is away and are lost on a restart")
		return nil
	}
	ob, err := mqtt.OpenOutbox(dir, mqtt.OutboxOptions{
		MaxEntries:     cfg.MQTT.Outbox.MaxEntries,
		CommitInterval: cfg.MQTT.Outbox.CommitInterval,
		GapTopic:       mqttTopics(cfg).Events(),
		Gateway:        cfg.Gateway,
		Logger:         d.log.With("part", "outbox"),
		Now:            d.now,
	})
	if err != nil {
		return fmt.Errorf("state directory %s: %w", dir, err)
	}
	d.mu.Lock()
	d.outbox = ob
	d.mu.Unlock()
	return nil
}

func (d *Daemon) closeOutbox() {
	d.mu.Lock()
	ob := d.outbox
	d.mu.Unlock()
	if ob != nil {
		if err := ob.Close(); err != nil {
			d.log.Error("closing the outbox", "err", err)
		}
	}
}

// reload reads the configuration again and swaps it in whole when it is
// valid; it reports whether it did, and whether the publisher must be
// rebuilt.
func (d *Daemon) reload() (applied, newPublisher bool) {
	if d.opts.Load == nil {
		return false, false
	}
	cfg, err := d.opts.Load()
	if err == nil {
		var heads []*head
		if heads, err = buildHeads(cfg); err == nil {
			d.mu.Lock()
			prev := d.heads
			d.mu.Unlock()
			err = d.attachAlarms(heads, prev)
		}
		if err == nil {
			d.mu.Lock()
			old := d.cfg
			gone := removedHeads(old, cfg)
			d.cfg, d.heads = cfg, heads
			for _, name := range gone {
				delete(d.latest, name)
			}
			d.mu.Unlock()
			d.log.Info("configuration reloaded", "heads", len(heads))
			d.feedHeads()
			d.feedAlarms()
			if publisherChanged(old, cfg) {
				return true, true
			}
			// Removed heads lose their retained info, removed alarms their
			// retained state; the others get theirs anew.
			topics := mqttTopics(old)
			for _, name := range gone {
				d.pub.Publish(mqtt.Message{Topic: topics.Info(name), Retain: true})
			}
			for _, a := range removedAlarms(old, cfg) {
				d.pub.Publish(mqtt.Message{Topic: topics.Alarm(a[0], a[1]), Retain: true})
			}
			for _, m := range d.infoMessages() {
				d.pub.Publish(m)
			}
			return true, false
		}
	}
	d.log.Error("configuration reload rejected; the running configuration stays", "err", err)
	return false, false
}

func removedHeads(old, cfg *config.Config) []string {
	var gone []string
	for _, h := range old.Heads {
		if _, ok := cfg.Head(h.Name); !ok {
			gone = append(gone, h.Name)
		}
	}
	return gone
}

// removedAlarms lists the alarms (head, alarm) of old that cfg no longer
// has, its removed heads' included.
func removedAlarms(old, cfg *config.Config) [][2]string {
	var gone [][2]string
	for _, h := range old.Heads {
		nh, kept := cfg.Head(h.Name)
		for _, a := range h.Alarms {
			if !kept || !slices.ContainsFunc(nh.Alarms, func(r config.AlarmRule) bool { return r.Name == a.Name }) {
				gone = append(gone, [2]string{h.Name, a.Name})
			}
		}
	}
	return gone
}

func publisherChanged(old, cfg *config.Config) bool {
	return old.Gateway != cfg.Gateway || old.MQTT.Root != cfg.MQTT.Root ||
		old.MQTT.ClientID != cfg.MQTT.ClientID || old.MQTT.Username != cfg.MQTT.Username ||
		old.MQTT.Queue != cfg.MQTT.Queue || old.MQTT.QoS != cfg.MQTT.QoS || !slices.Equal(old.MQTT.Brokers, cfg.MQTT.Brokers)
}

func mqttTopics(cfg *config.Config) mqtt.Topics {
	return mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
}

// startPublisher creates the publisher for the current configuration and
// runs it; stop cancels it and returns once it has flushed and stopped.
func (d *Daemon) startPublisher(parent context.Context) (stop func(), err error) {
	d.mu.Lock()
	cfg := d.cfg
	d.mu.Unlock()
	brokers := cfg.MQTT.Brokers
	if len(d.opts.Brokers) > 0 {
		brokers = d.opts.Brokers
	}
	if len(brokers) == 0 {
		return nil, errors.New("no MQTT broker configured (mqtt.brokers or -broker)")
	}
	clientID := cfg.MQTT.ClientID
	if clientID == "" {
		clientID = "glowgate-" + cfg.Gateway
	}
	var tlsConfig *tls.Config
	if t := cfg.MQTT.TLS; t != nil {
		var err error
		if tlsConfig, err = mqtt.TLSConfig(t.CAFile, t.CertFile, t.KeyFile, t.ServerName); err != nil {
			return nil, fmt.Errorf("mqtt tls: %w", err)
		}
	}
	var commandTopic string
	var onCommand func([]byte)
	if d.gate != nil {
		commandTopic, onCommand = mqttTopics(cfg).Cmd(), d.onCommand
	}
	d.mu.Lock()
	outbox := d.outbox
	d.mu.Unlock()
	pub, err := mqtt.NewPublisher(mqtt.Options{
		Brokers:            brokers,
		ClientID:           clientID,
		Username:           cfg.MQTT.Username,
		Password:           cfg.MQTT.Password,
		TLS:                tlsConfig,
		Outbox:             outbox,
		CommandTopic:       commandTopic,
		OnCommand:          onCommand,
		KeepAlive:          cfg.MQTT.KeepAlive,
		ConnectTimeout:     cfg.MQTT.ConnectTimeout,
		QueueSize:          cfg.MQTT.Queue,
		ReadingsAtMostOnce: cfg.MQTT.QoS == 0,
		StateTopic:         mqttTopics(cfg).State(),
		Online:             []byte("online"),
		Offline:            []byte("offline"),
		OnConnect:          d.connectMessages,
		FlushTimeout:       5 * time.Second,
		Logger:             d.log.With("part", "mqtt"),
	})
	if err != nil {
		return nil, fmt.Errorf("mqtt publisher: %w", err)
	}
	d.mu.Lock()
	d.pub = pub
	d.mu.Unlock()
	ctx, cancel := context.WithCancel(parent)
	done := make(chan struct{})
	go func() {
		defer close(done)
		if err := pub.Run(ctx); err != nil {
			d.log.Error("mqtt publisher stopped", "err", err)
		}
	}()
	return func() {
		cancel()
		<-done
	}, nil
}

// infoMessages are the retained info payloads of the current heads.
func (d *Daemon) infoMessages() []mqtt.Message {
	d.mu.Lock()
	defer d.mu.Unlock()
	topics := mqttTopics(d.cfg)
	msgs := make([]mqtt.Message, 0, len(d.heads))
	for _, h := range d.heads {
		msgs = append(msgs, mqtt.Message{Topic: topics.Info(h.cfg.Name), Payload: h.infoPayload(d.opts.Version), Retain: true})
	}
	return msgs
}

// connectMessages are sent first on every connection to a broker: each
// head's info and the retained state of each alarm as last published (the
// same message again, seq included).
func (d *Daemon) connectMessages() []mqtt.Message {
	msgs := d.infoMessages()
	d.mu.Lock()
	heads, topics := d.heads, mqttTopics(d.cfg)
	d.mu.Unlock()
	return append(msgs, d.alarmStateMessages(heads, topics)...)
}

// bus is one field bus a line owner polls: a Modbus TCP endpoint or an
// RS-485 line.
type bus struct {
	kind, name string // "endpoint" or "line", and its name
	timeout    time.Duration
	backoffMax time.Duration
	inFlight   int
	open       func() modbus.Reader
	heads      func(h config.Head) bool
}

// buses lists the field buses of a configuration.
func buses(cfg *config.Config, log *slog.Logger) []bus {
	var out []bus
	for _, ep := range cfg.Endpoints {
		out = append(out, bus{
			kind: "endpoint", name: ep.Name, timeout: ep.Timeout, backoffMax: ep.BackoffMax, inFlight: ep.InFlight,
			open:  func() modbus.Reader { return modbus.NewTCPClient(ep.Address, ep.Timeout) },
			heads: func(h config.Head) bool { return h.Endpoint == ep.Name },
		})
	}
	for _, l := range cfg.Lines {
		out = append(out, bus{
			kind: "line", name: l.Name, timeout: l.Timeout, backoffMax: l.BackoffMax,
			open: func() modbus.Reader {
				return modbus.NewRTUClient(modbus.SerialConfig{
					Device: l.Device, Baud: l.Baud, Parity: l.Parity, StopBits: l.StopBits,
					Timeout: l.Timeout, Logger: log.With("line", l.Name),
				})
			},
			heads: func(h config.Head) bool { return h.Line == l.Name },
		})
	}
	return out
}

// poll runs one owner goroutine per field bus until ctx is done.
func (d *Daemon) poll(ctx context.Context) error {
	d.mu.Lock()
	cfg, heads, pub := d.cfg, d.heads, d.pub
	d.mu.Unlock()
	topics := mqttTopics(cfg)
	g, ctx := errgroup.WithContext(ctx)
	var lines []*modbus.Line
	defer func() {
		d.mu.Lock()
		d.lines = nil
		d.mu.Unlock()
	}()
	for _, b := range buses(cfg, d.log) {
		var mine []*head
		for _, h := range heads {
			if b.heads(h.cfg) {
				mine = append(mine, h)
			}
		}
		if len(mine) == 0 {
			continue
		}
		polls := make([]modbus.Poll, len(mine))
		topicOf := make([]string, len(mine))
		for i, h := range mine {
			polls[i] = h.poll()
			topicOf[i] = topics.Reading(h.cfg.Name)
		}
		scratch := make([]float64, 0, convert.MaxChannels)
		deliver := func(res modbus.Result) {
			h := mine[res.Poll]
			var r mqtt.Reading
			if res.Err != nil {
				r = h.failed(res.Time, res.Err)
			} else {
				r = h.polled(res.Time, res.Blocks, scratch)
			}
			payload := d.publish(topicOf[res.Poll], pub, cfg.MQTT.QoS == 0, r)
			d.evaluate(h, &r)
			if srv := d.status; srv != nil {
				srv.ReadingJSON(&r, payload)
			}
		}
		line := modbus.NewLine(modbus.LineConfig{
			Name:       b.name,
			Timeout:    b.timeout,
			BackoffMax: b.backoffMax,
			InFlight:   b.inFlight,
			Logger:     d.log.With(b.kind, b.name),
			Now:        d.now,
		}, b.open(), polls, deliver)
		lines = append(lines, line)
		g.Go(func() error {
			if err := line.Run(ctx); err != nil && !errors.Is(err, context.Canceled) {
				return fmt.Errorf("%s %s: %w", b.kind, b.name, err)
			}
			return nil
		})
	}
	d.mu.Lock()
	d.lines = lines
	d.mu.Unlock()
	return g.Wait()
}

// publish numbers a reading, remembers it as the head's latest and hands
// it to the publisher without waiting (at QoS 0 when atMostOnce; the
// outbox's publisher knows that of itself). It returns the payload queued,
// which the caller may read but not change.
//
// Numbering and queueing happen under one lock, so that the queue holds
// the readings of all lines in sequence order.
func (d *Daemon) publish(topic string, pub *mqtt.Publisher, atMostOnce bool, r mqtt.Reading) (payload []byte) {
	if ob := d.outbox; ob != nil {
		_, err := ob.Append(mqtt.KindReading, topic, false, func(seq uint64) []byte {
			r.Seq = seq
			payload = r.AppendJSON(make([]byte, 0, 640))
			return payload
		})
		if err != nil {
			d.log.Error("outbox append", "head", r.Head, "err", err)
		}
	} else {
		d.seqMu.Lock()
		r.Seq = d.seq.Add(1)
		payload = r.AppendJSON(make([]byte, 0, 640))
		pub.Publish(mqtt.Message{Topic: topic, Payload: payload, AtMostOnce: atMostOnce})
		d.seqMu.Unlock()
	}
	d.mu.Lock()
	d.latest[r.Head] = r
	d.mu.Unlock()
	return payload
}

// runAlarmTicker drives the alarms' time-driven transitions once a
// second until ctx is done.
func (d *Daemon) runAlarmTicker(ctx context.Context) {
	t := time.NewTicker(time.Second)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			d.tickAlarms(d.now())
		}
	}
}

// config returns the running configuration.
func (d *Daemon) config() *config.Config {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.cfg
}

// Latest returns the most recent reading of every head, by head name.
func (d *Daemon) Latest() []mqtt.Reading {
	d.mu.Lock()
	defer d.mu.Unlock()
	out := make([]mqtt.Reading, 0, len(d.latest))
	for _, r := range d.latest {
		out = append(out, r)
	}
	slices.SortFunc(out, func(a, b mqtt.Reading) int { return strings.Compare(a.Head, b.Head) })
	return out
}

// PublisherStats reports the publisher's counters.
func (d *Daemon) PublisherStats() mqtt.Stats {
	d.mu.Lock()
	pub := d.pub
	d.mu.Unlock()
	if pub == nil {
		return mqtt.Stats{}
	}
	return pub.Stats()
}
