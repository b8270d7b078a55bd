package mqtt

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"net"
	"net/url"
	"sync"
	"sync/atomic"
	"time"
	"unicode/utf8"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/eclipse/paho.mqtt.golang/packets"
)

// Message is one publication. Every message goes out at QoS 1.
type Message struct {
	Topic   string
	Payload []byte
	Retain  bool
	// AtMostOnce sends the message at QoS 0: no PUBACK, and it is done
	// with once written to the connection, so a connection that breaks
	// then loses it. Otherwise QoS 1.
	AtMostOnce bool
}

// Defaults of Options fields left zero.
const (
	DefaultQueueSize      = 10000
	DefaultWindow         = 64
	DefaultKeepAlive      = 30 * time.Second
	DefaultConnectTimeout = 5 * time.Second
	DefaultFlushTimeout   = 5 * time.Second
	DefaultBackoffMin     = 250 * time.Millisecond
	DefaultBackoffMax     = 10 * time.Second
)

// maxPacketRemaining is the largest "remaining length" of an MQTT packet
// (MQTT 3.1.1 section 2.2.3).
const maxPacketRemaining = 268435455

// maxWindow is the number of packet identifiers MQTT offers.
const maxWindow = 65535

// Options configure a Publisher. Zero values take the defaults named above.
type Options struct {
	// Brokers are broker URLs (tcp://host:port, ssl://host:port, ws://...),
	// tried in turn until one accepts the connection.
	Brokers []string
	// ClientID identifies the connection to the broker. Two clients with
	// the same identifier push each other off the broker.
	ClientID           string
	Username, Password string
	// TLS configures ssl://, tls://, mqtts://, tcps:// and wss://
	// connections; nil uses the system roots (see TLSConfig). When TLS is
	// set, every broker must use one of these schemes: a plaintext URL is
	// refused rather than used without TLS. A broker whose certificate
	// fails verification is never contacted without TLS either: the
	// failure is logged as an error and the next attempt uses TLS again.
	// The password is never logged, nor is the user information of a
	// broker URL.
	TLS *tls.Config
	// KeepAlive is the MQTT keep-alive interval, whole seconds (default
	// 30 s). ConnectTimeout bounds one connection attempt, a stalled
	// publish and the wait for a keep-alive answer (default 5 s).
	KeepAlive, ConnectTimeout time.Duration
	// QueueSize bounds the in-memory queue, messages in flight included
	// (default 10000).
	QueueSize int
	// Window is the number of QoS 1 publications in flight, sent and not
	// yet acknowledged (default 64, at most QueueSize).
	Window int
	// ReadingsAtMostOnce sends the outbox's readings at QoS 0 (see
	// Message.AtMostOnce); its events and states still go at QoS 1.
	ReadingsAtMostOnce bool
	// StateTopic, when set, carries the retained connection state: Online
	// is published on every connection, Offline is the Will (retained,
	// QoS 1) and is published before a clean stop. Empty payloads default
	// to "online" and "offline" (an empty retained payload would delete
	// the state).
	StateTopic      string
	Online, Offline []byte
	// OnConnect returns messages (head info, alarm states) published after
	// Online on every connection, before queued messages. It is called
	// from Run's goroutine.
	OnConnect func() []Message
	// OnAck, when set, is called from Run's goroutine with each queued
	// message and each outbox entry (as sent: a backlog reading marked
	// replayed) once the broker has acknowledged it (PUBACK), queued
	// messages in queue order. It must not block. A message may be
	// acknowledged twice when the connection broke after the broker got it
	// and before its PUBACK came.
	OnAck func(Message)
	// FlushTimeout bounds the delivery of what is queued when Run's
	// context ends (default 5 s).
	FlushTimeout time.Duration
	// BackoffMin and BackoffMax bound the wait between connection attempts,
	// doubled after each round of failures, with jitter (defaults 250 ms
	// and 10 s).
	BackoffMin, BackoffMax time.Duration
	// Logger receives connection changes and rate-limited drop reports;
	// nil discards them.
	Logger *slog.Logger

	// Outbox, when set, is drained at QoS 1 beside the in-memory queue
	// (which keeps carrying what Publish is given: info and retained
	// states). Each outbox entry is deleted from the outbox once a broker
	// has acknowledged it (PUBACK), so a crash or a broken connection can
	// make an entry arrive twice but never lose it.
	//
	// Entries appended before the current connection came up are the
	// backlog; later ones are live. Live entries are sent first, and the
	// backlog drains beside them with at least a quarter of the window,
	// so current readings reach the broker at once after a reconnection
	// however long the backlog. Each part goes out in sequence order.
	// A backlog reading is sent with "replayed":true: its stored payload
	// ends with `"replayed":false}` (Reading.AppendJSON writes that field
	// last), and the publisher rewrites those bytes; other payloads go out
	// as stored.
	//
	// The outbox must stay open until Run returns.
	Outbox *Outbox

	// CommandTopic, when set, is subscribed at QoS 1 on every connection,
	// and each message received on it is handed to OnCommand, which is
	// required then. OnCommand runs on one goroutine owned by Run, one
	// command at a time, with a copy of the payload; up to 64 commands
	// wait for it, and further ones are dropped and logged. Retained
	// messages on the topic are ignored: a stale command must not run
	// again at every connection. Run waits for OnCommand to return before
	// it returns.
	CommandTopic string
	OnCommand    func(payload []byte)
}

// commandBuffer is the number of received commands waiting for OnCommand.
const commandBuffer = 64

// Stats is a snapshot of a Publisher's counters.
type Stats struct {
	Queued    int    // messages held, in flight included
	InFlight  int    // queued messages sent on the connection, PUBACK awaited
	Published uint64 // queued messages acknowledged by a broker
	Dropped   uint64 // messages dropped because the queue was full
	Rejected  uint64 // messages refused as unpublishable (bad topic, too large)
	Connects  uint64 // successful connections
	Connected bool
	Broker    string // broker of the current connection, "" when disconnected

	OutboxAcked uint64 // outbox entries acknowledged by a broker
	Replayed    uint64 // the backlog entries among them

	Commands        uint64 // commands received and handed to OnCommand
	CommandsDropped uint64 // commands dropped because OnCommand was behind
}

// Publisher delivers messages to an MQTT broker at QoS 1 over a connection
// it keeps up by itself. Publish only queues; Run owns the connection.
//
// Delivery is at least once for every message that stays in the queue: a
// message leaves the queue only on its PUBACK, and when a connection breaks
// every message in flight goes back to the front of the queue, in order, to
// be sent again on the next connection. Duplicates are therefore possible
// (consumers dedupe on gateway and sequence number); loss is not, except by
// the documented drops of a full queue and by a stop whose flush times out.
//
// Each connection uses a new paho client with automatic reconnection off
// and a clean session, so a completed token with a nil error is a PUBACK
// of this connection, never a resumed session's guess.
type Publisher struct {
	o    Options
	log  *slog.Logger
	wake chan struct{} // a message was queued

	running atomic.Bool
	writers sync.WaitGroup // one writer goroutine per link

	mu        sync.Mutex
	q         queue
	published uint64
	dropped   uint64
	rejected  uint64
	connects  uint64
	connected bool
	broker    string
	connCh    chan struct{} // closed while connected
	dropLog   limiter
	rejectLog limiter
	readLog   limiter

	outboxAcked uint64
	replayed    uint64

	cmds            chan []byte // received commands, for OnCommand
	commands        uint64
	commandsDropped uint64
	cmdLog          limiter
}

// NewPublisher checks o, fills in defaults and returns a Publisher that
// queues from now on. Nothing connects until Run.
func NewPublisher(o Options) (*Publisher, error) {
	if err := o.fill(); err != nil {
		return nil, fmt.Errorf("mqtt publisher: %w", err)
	}
	lg := o.Logger
	if lg == nil {
		lg = slog.New(slog.DiscardHandler)
	}
	return &Publisher{
		o:         o,
		log:       lg,
		wake:      make(chan struct{}, 1),
		q:         newQueue(o.QueueSize),
		connCh:    make(chan struct{}),
		dropLog:   limiter{period: 10 * time.Second},
		rejectLog: limiter{period: 10 * time.Second},
		readLog:   limiter{period: time.Minute},
		cmds:      make(chan []byte, commandBuffer),
		cmdLog:    limiter{period: 10 * time.Second},
	}, nil
}

func (o *Options) fill() error {
	if len(o.Brokers) == 0 {
		return errors.New("no broker given")
	}
	for i, b := range o.Brokers {
		u, err := url.Parse(b)
		if err != nil {
			// url.Error repeats the URL, password included.
			var ue *url.Error
			if errors.As(err, &ue) {
				err = ue.Err
			}
			return fmt.Errorf("broker %d: not a URL: %w", i+1, err)
		}
		switch u.Scheme {
		case "tcp", "mqtt", "ws":
			if o.TLS != nil {
				return fmt.Errorf("broker %d %s: TLS is configured but scheme %q is plaintext; use ssl:// (or wss://)",
					i+1, u.Redacted(), u.Scheme)
			}
		case "ssl", "tls", "mqtts", "tcps", "wss":
		default:
			return fmt.Errorf("broker %d %s: scheme %q, want tcp, mqtt, ssl, tls, mqtts, tcps, ws or wss", i+1, u.Redacted(), u.Scheme)
		}
		if u.Host == "" {
			return fmt.Errorf("broker %d %s: no host", i+1, u.Redacted())
		}
	}
	if o.CommandTopic != "" {
		if err := checkPublishTopic(o.CommandTopic); err != nil {
			return fmt.Errorf("command topic: %w", err)
		}
		if o.OnCommand == nil {
			return errors.New("command topic set without OnCommand")
		}
	}
	if !utf8.ValidString(o.ClientID) || len(o.ClientID) > maxTopicLen {
		return fmt.Errorf("client id %q: not valid UTF-8 or too long", o.ClientID)
	}
	durations := []struct {
		name string
		d    *time.Duration
		def  time.Duration
	}{
		{"keep-alive", &o.KeepAlive, DefaultKeepAlive},
		{"connect timeout", &o.ConnectTimeout, DefaultConnectTimeout},
		{"flush timeout", &o.FlushTimeout, DefaultFlushTimeout},
		{"minimum backoff", &o.BackoffMin, DefaultBackoffMin},
		{"maximum backoff", &o.BackoffMax, DefaultBackoffMax},
	}
	for _, d := range durations {
		if *d.d < 0 {
			return fmt.Errorf("%s %v: negative", d.name, *d.d)
		}
		if *d.d == 0 {
			*d.d = d.def
		}
	}
	if o.KeepAlive < time.Second {
		return fmt.Errorf("keep-alive %v: under the MQTT granularity of 1s", o.KeepAlive)
	}
	if o.BackoffMin > o.BackoffMax {
		return fmt.Errorf("minimum backoff %v above maximum backoff %v", o.BackoffMin, o.BackoffMax)
	}
	switch {
	case o.QueueSize < 0:
		return fmt.Errorf("queue size %d: negative", o.QueueSize)
	case o.QueueSize == 0:
		o.QueueSize = DefaultQueueSize
	}
	switch {
	case o.Window < 0:
		return fmt.Errorf("window %d: negative", o.Window)
	case o.Window == 0:
		o.Window = min(DefaultWindow, o.QueueSize)
	case o.Window > o.QueueSize:
		return fmt.Errorf("window %d larger than queue size %d", o.Window, o.QueueSize)
	case o.Window > maxWindow:
		return fmt.Errorf("window %d: more than the %d packet identifiers of MQTT", o.Window, maxWindow)
	}
	if o.StateTopic != "" {
		if err := checkPublishTopic(o.StateTopic); err != nil {
			return fmt.Errorf("state topic: %w", err)
		}
		if len(o.Online) == 0 {
			o.Online = []byte("online")
		}
		if len(o.Offline) == 0 {
			o.Offline = []byte("offline")
		}
	}
	return nil
}

// Publish queues m for delivery and returns at once; it never waits for
// the network and is safe for concurrent use. The queue keeps m.Payload:
// the caller must not change it afterwards.
//
// It returns true when m was queued without loss. It returns false when m
// cannot be published (empty topic, wildcard, invalid UTF-8, too large:
// counted in Stats.Rejected), or when the queue was full: then the oldest
// queued message that is not retained and not in flight is dropped to make
// room, as a newer reading supersedes an older one, and m is queued; when
// every such message is retained (current states), m itself is dropped.
// Either drop counts in Stats.Dropped and is logged, at most once per 10 s
// with the number dropped meanwhile.
func (p *Publisher) Publish(m Message) bool {
	err := checkPublishTopic(m.Topic)
	if err == nil && len(m.Payload) > maxPacketRemaining-4-len(m.Topic) {
		err = fmt.Errorf("payload of %d bytes too large for one MQTT packet", len(m.Payload))
	}
	now := time.Now()
	if err != nil {
		p.mu.Lock()
		p.rejected++
		logIt, held := p.rejectLog.allow(now)
		p.mu.Unlock()
		if logIt {
			p.log.Warn("mqtt message refused", "topic", m.Topic, "err", err, "refused_since_last_report", held)
		}
		return false
	}
	p.mu.Lock()
	full := p.q.full()
	queued := true
	if full {
		p.dropped++
		queued = p.q.dropOldestUnsent()
	}
	if queued {
		p.q.push(m)
	}
	var logIt bool
	var held int
	if full {
		logIt, held = p.dropLog.allow(now)
	}
	p.mu.Unlock()
	if logIt {
		which := "oldest queued non-retained message"
		if !queued {
			which = "this message"
		}
		p.log.Warn("mqtt queue full, message dropped", "dropped", which, "topic", m.Topic,
			"queue_size", p.o.QueueSize, "dropped_since_last_report", held)
	}
	if queued {
		select {
		case p.wake <- struct{}{}:
		default:
		}
	}
	return !full
}

// Stats returns the current counters.
func (p *Publisher) Stats() Stats {
	p.mu.Lock()
	defer p.mu.Unlock()
	return Stats{
		Queued:    p.q.len(),
		InFlight:  p.q.sent,
		Published: p.published,
		Dropped:   p.dropped,
		Rejected:  p.rejected,
		Connects:  p.connects,
		Connected: p.connected,
		Broker:    p.broker,

		OutboxAcked:     p.outboxAcked,
		Replayed:        p.replayed,
		Commands:        p.commands,
		CommandsDropped: p.commandsDropped,
	}
}

// Connected returns a channel that is closed while the publisher is
// connected to a broker. Once the connection breaks, later calls return a
// new open channel.
func (p *Publisher) Connected() <-chan struct{} {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.connCh
}

// Run keeps a connection to one of the brokers and delivers the queue
// over it until ctx ends. A broker that is absent or goes away is not an
// error: Run tries the brokers in turn with capped exponential backoff and
// jitter while Publish keeps queueing.
//
// When ctx ends, Run flushes the queue for up to FlushTimeout (connecting
// if it has to), then publishes Offline on StateTopic and waits up to
// ConnectTimeout for its PUBACK, disconnects and returns nil. Messages
// still queued then stay in the queue (Stats.Queued), and a later Run
// delivers them. Run must not be called while another Run is running.
func (p *Publisher) Run(ctx context.Context) error {
	if !p.running.CompareAndSwap(false, true) {
		return errors.New("mqtt publisher: Run already running")
	}
	defer p.running.Store(false)
	if p.o.OnCommand != nil {
		cctx, cancel := context.WithCancel(context.Background())
		var wg sync.WaitGroup
		wg.Add(1)
		go func() {
			defer wg.Done()
			p.runCommands(cctx)
		}()
		defer func() {
			cancel()
			wg.Wait()
		}()
	}
	var (
		l    *link
		next int // index of the broker to try next
		bo   = backoff{min: p.o.BackoffMin, max: p.o.BackoffMax}
		fail = limiter{period: time.Minute}
	)
	for ctx.Err() == nil {
		if l == nil {
			var err error
			l, err = p.connect(p.o.Brokers[next], p.o.ConnectTimeout, &fail)
			if err != nil {
				next = (next + 1) % len(p.o.Brokers)
				if next == 0 {
					sleep(ctx, bo.next())
				}
				continue
			}
			bo.reset()
		}
		err := p.serve(ctx, l, false)
		if ctx.Err() != nil {
			break
		}
		p.lose(l, err)
		l = nil
		sleep(ctx, bo.next())
	}
	p.shutdown(l, next)
	return nil
}

// shutdown flushes the queue within FlushTimeout over l, or over a new
// connection when l is nil, then says Offline and disconnects.
func (p *Publisher) shutdown(l *link, next int) {
	deadline := time.Now().Add(p.o.FlushTimeout)
	ctx, cancel := context.WithDeadline(context.Background(), deadline)
	defer cancel()
	bo := backoff{min: p.o.BackoffMin, max: p.o.BackoffMax}
	fail := limiter{period: time.Minute}
	for {
		if l == nil {
			if p.Stats().Queued == 0 || ctx.Err() != nil {
				break
			}
			var err error
			l, err = p.connect(p.o.Brokers[next], min(p.o.ConnectTimeout, time.Until(deadline)), &fail)
			if err != nil {
				next = (next + 1) % len(p.o.Brokers)
				if next == 0 {
					sleep(ctx, bo.next())
				}
				continue
			}
		}
		err := p.serve(ctx, l, true)
		if err == nil || ctx.Err() != nil {
			break
		}
		p.lose(l, err)
		l = nil
		sleep(ctx, bo.next())
	}
	if l != nil {
		p.sayOffline(l)
		close(l.dead)
		l.c.Disconnect(250)
		p.setDisconnected()
	}
	// A writer caught in a Publish on a broken connection leaves within
	// the write timeout (ConnectTimeout).
	p.writers.Wait()
	p.mu.Lock()
	p.q.unsendAll() // unacknowledged: to be sent again by a later Run
	p.mu.Unlock()
	if p.o.Outbox != nil {
		p.o.Outbox.release()
	}
	if n := p.Stats().Queued; n > 0 {
		p.log.Warn("mqtt publisher stopped with messages undelivered", "queued", n, "flush_timeout", p.o.FlushTimeout)
	} else {
		p.log.Info("mqtt publisher stopped, queue delivered")
	}
}

// link is one connection: a paho client, its writer goroutine and the
// publications in flight on it.
//
// paho's Publish can block for the whole write timeout when the connection
// breaks under it, so Run's goroutine never calls it: it hands messages to
// the link's writer (out) and takes their tokens back in the same order
// (toks). Both channels hold Window entries and at most Window messages
// are handed out, so neither side ever waits for the other.
type link struct {
	c      paho.Client
	broker string
	lost   chan error    // the connection-lost handler's report
	out    chan outgoing // to the writer
	toks   chan pending  // from the writer, in order
	dead   chan struct{} // closed when the link is given up: the writer stops

	pre     []Message // Online and OnConnect messages not yet handed out
	greeted bool      // pre has been filled
	n       int       // handed out, not yet completed
	head    pending   // oldest token taken from toks, when hasHead
	hasHead bool

	// The outbox, when there is one: entries up to boundary (the last
	// assigned when the connection came up) are the backlog, read from
	// backNext; later ones are live, read from liveNext.
	boundary, liveNext, backNext uint64
	backDone                     bool
	liveN, backN                 int // in flight
	replayed                     int // backlog entries handed out
}

// source says where a message handed to the writer came from.
type source uint8

const (
	fromConnect source = iota // Online and OnConnect
	fromQueue
	fromLive    // outbox, appended after the connection came up
	fromBacklog // outbox, appended before
)

type outgoing struct {
	m   Message
	src source
	seq uint64 // outbox entries
}

type pending struct {
	tok paho.Token
	m   Message
	src source
	seq uint64
}

// write publishes what serve hands out until the link is given up.
func (p *Publisher) write(l *link) {
	defer p.writers.Done()
	for {
		select {
		case <-l.dead:
			return
		case o := <-l.out:
			qos := byte(1)
			if o.m.AtMostOnce {
				qos = 0
			}
			tok := l.c.Publish(o.m.Topic, qos, o.m.Retain, o.m.Payload)
			select {
			case l.toks <- pending{tok: tok, m: o.m, src: o.src, seq: o.seq}:
			case <-l.dead:
				return
			}
		}
	}
}

// connect opens a connection to broker with a new paho client, waits for
// the CONNACK, at most timeout, and subscribes to CommandTopic.
func (p *Publisher) connect(broker string, timeout time.Duration, fail *limiter) (*link, error) {
	shown := redact(broker)
	l := &link{
		broker: shown,
		lost:   make(chan error, 1),
		out:    make(chan outgoing, p.o.Window),
		toks:   make(chan pending, p.o.Window),
		dead:   make(chan struct{}),
	}
	o := paho.NewClientOptions().
		AddBroker(broker).
		SetClientID(p.o.ClientID).
		SetUsername(p.o.Username).
		SetPassword(p.o.Password).
		SetProtocolVersion(4).
		SetCleanSession(true).
		SetAutoReconnect(false).
		SetConnectRetry(false).
		SetStore(paho.NewMemoryStore()).
		SetOrderMatters(false).
		SetKeepAlive(p.o.KeepAlive).
		SetPingTimeout(p.o.ConnectTimeout).
		SetWriteTimeout(p.o.ConnectTimeout).
		SetConnectTimeout(timeout).
		SetDialer(&net.Dialer{Timeout: timeout}).
		SetCustomOpenConnectionFn(openConnection).
		SetConnectionLostHandler(func(_ paho.Client, err error) {
			select {
			case l.lost <- err:
			default:
			}
		})
	if p.o.TLS != nil {
		o.SetTLSConfig(p.o.TLS)
	}
	if p.o.StateTopic != "" {
		o.SetBinaryWill(p.o.StateTopic, p.o.Offline, 1, true)
	}
	c := paho.NewClient(o)
	tok := c.Connect()
	<-tok.Done()
	if err := tok.Error(); err != nil {
		p.logConnectError(shown, err, fail)
		return nil, fmt.Errorf("connect %s: %w", shown, err)
	}
	if p.o.CommandTopic != "" {
		if err := p.subscribeCommands(c, timeout); err != nil {
			c.Disconnect(0)
			if logIt, held := fail.allow(time.Now()); logIt {
				p.log.Warn("mqtt connect failed", "broker", shown, "err", err, "failures_since_last_report", held)
			}
			return nil, fmt.Errorf("connect %s: %w", shown, err)
		}
	}
	l.c = c
	if ob := p.o.Outbox; ob != nil {
		l.boundary = ob.lastAssigned()
		ob.dropEarly() // appended before the link: its backlog reads them
		l.liveNext, l.backNext = l.boundary+1, 1
	}
	p.writers.Add(1)
	go p.write(l)
	p.mu.Lock()
	p.connected = true
	p.broker = shown
	p.connects++
	close(p.connCh)
	queued := p.q.len()
	p.mu.Unlock()
	failures := fail.reset()
	args := []any{"broker", shown, "queued", queued, "failed_attempts", failures}
	if ob := p.o.Outbox; ob != nil {
		args = append(args, "outbox_entries", ob.Stats().Depth, "backlog_through_seq", l.boundary)
	}
	p.log.Info("mqtt connected", args...)
	return l, nil
}

// logConnectError logs a failed connection attempt. Refused credentials
// and a broker certificate that fails verification are configuration
// faults and logged as errors, each with what to check; other failures
// are warnings. Repeats are rate-limited by fail.
func (p *Publisher) logConnectError(broker string, err error, fail *limiter) {
	logIt, held := fail.allow(time.Now())
	if !logIt {
		return
	}
	var (
		cve *tls.CertificateVerificationError
		uae x509.UnknownAuthorityError
		hne x509.HostnameError
		cie x509.CertificateInvalidError
		rhe tls.RecordHeaderError
	)
	switch {
	case errors.As(err, &cve), errors.As(err, &uae), errors.As(err, &hne), errors.As(err, &cie):
		p.log.Error("mqtt broker certificate failed verification; not connecting (no fallback to plaintext)",
			"broker", broker, "err", err, "check", "CA file, server name and the broker's certificate",
			"failures_since_last_report", held)
	case errors.As(err, &rhe):
		p.log.Error("mqtt broker did not answer in TLS; not connecting (no fallback to plaintext)",
			"broker", broker, "err", err, "check", "the broker port is its TLS listener", "failures_since_last_report", held)
	case errors.Is(err, packets.ErrorRefusedBadUsernameOrPassword), errors.Is(err, packets.ErrorRefusedNotAuthorised):
		p.log.Error("mqtt broker refused the credentials", "broker", broker, "username", p.o.Username,
			"err", err, "failures_since_last_report", held)
	default:
		p.log.Warn("mqtt connect failed", "broker", broker, "err", err, "failures_since_last_report", held)
	}
}

// redact returns broker with any password in its user information
// replaced by "xxxxx".
func redact(broker string) string {
	u, err := url.Parse(broker)
	if err != nil {
		return broker // fill has parsed it already
	}
	return u.Redacted()
}

// serve sends Online and the OnConnect messages once per connection, then
// keeps up to Window messages in flight from the queue and the outbox,
// completing their tokens in order. It returns the error that broke the
// connection, or ctx.Err(), or nil when flush is set and the queue is
// empty. While flushing it sends no more outbox entries: they are durable
// and wait for the next connection.
func (p *Publisher) serve(ctx context.Context, l *link, flush bool) error {
	if !l.greeted {
		l.greeted = true
		if p.o.StateTopic != "" {
			l.pre = append(l.pre, Message{Topic: p.o.StateTopic, Payload: p.o.Online, Retain: true})
		}
		if p.o.OnConnect != nil {
			for _, m := range p.o.OnConnect() {
				if err := checkPublishTopic(m.Topic); err != nil {
					p.log.Warn("mqtt connect message refused", "topic", m.Topic, "err", err)
					continue
				}
				l.pre = append(l.pre, m)
			}
		}
	}
	for {
		p.fill(l, flush)
		var wake, committed <-chan struct{}
		var early <-chan entry
		if l.n < p.o.Window {
			wake = p.wake
			if p.o.Outbox != nil && !flush {
				committed = p.o.Outbox.committedSignal()
				early = p.o.Outbox.early
			}
		}
		var headDone, newHead = (<-chan struct{})(nil), l.toks
		if l.hasHead {
			headDone, newHead = l.head.tok.Done(), nil
		}
		if l.n == 0 {
			if flush && p.Stats().Queued == 0 {
				return nil
			}
			newHead = nil
		}
		select {
		case h := <-newHead:
			l.head, l.hasHead = h, true
		case <-headDone:
			if err := l.head.tok.Error(); err != nil {
				return fmt.Errorf("publish %s: %w", l.head.m.Topic, err)
			}
			h := l.head
			l.head, l.hasHead = pending{}, false
			l.n--
			switch h.src {
			case fromLive:
				l.liveN--
			case fromBacklog:
				l.backN--
			}
			p.completed(h)
		case <-wake:
		case <-committed:
		case e := <-early:
			p.sendEarly(l, &e)
		case <-ctx.Done():
			return ctx.Err()
		case err := <-l.lost:
			return fmt.Errorf("connection lost: %w", err)
		}
	}
}

// fill hands out messages until the window is full or nothing is ready:
// Online and OnConnect first, then the queue, then live outbox entries up
// to three quarters of the window while a backlog remains, then the
// backlog.
func (p *Publisher) fill(l *link, flush bool) {
	w := p.o.Window
	for l.n < w {
		var o outgoing
		if len(l.pre) > 0 {
			o = outgoing{m: l.pre[0], src: fromConnect}
			l.pre = l.pre[1:]
		} else {
			p.mu.Lock()
			m, ok := p.q.nextUnsent()
			p.mu.Unlock()
			if !ok {
				break
			}
			o = outgoing{m: m, src: fromQueue}
		}
		l.out <- o // never blocks: out holds Window entries
		l.n++
	}
	ob := p.o.Outbox
	if ob == nil || flush || l.n >= w {
		return
	}
	vis := ob.visible()
	reserve := max(1, w/4) // the backlog's share of the window
	liveCap := w
	if !l.backDone {
		liveCap = w - reserve
	}
	if n := min(w-l.n, liveCap-l.liveN); n > 0 && l.liveNext <= vis {
		es, next, err := ob.read(l.liveNext, maxSeq, n)
		if err != nil {
			p.readFailed(err)
			return
		}
		l.liveNext = next
		for i := range es {
			p.handOut(l, &es[i], fromLive)
		}
	}
	if l.backDone {
		return
	}
	// Read the backlog in batches, not one entry per PUBACK.
	free := w - l.n
	if free == 0 || (free < min(16, reserve) && l.n > 0) || l.backNext > vis {
		return
	}
	es, next, err := ob.read(l.backNext, l.boundary, free)
	if err != nil {
		p.readFailed(err)
		return
	}
	l.backNext = next
	for i := range es {
		if es[i].kind == KindReading {
			es[i].payload = markReplayed(es[i].payload)
		}
		p.handOut(l, &es[i], fromBacklog)
	}
	l.replayed += len(es)
	if l.backNext > l.boundary {
		l.backDone = true
		p.log.Info("mqtt outbox backlog handed out", "broker", l.broker, "entries", l.replayed, "through_seq", l.boundary)
	}
}

// sendEarly hands out an event or state before its commit, unless this
// link's reads have passed it (they sent it, or skipped it as claimed) or
// it is claimed already. Either way it is sent once on this link, and its
// PUBACK acknowledges it like any other.
func (p *Publisher) sendEarly(l *link, e *entry) {
	passed := e.seq < l.liveNext
	if e.seq <= l.boundary {
		passed = e.seq < l.backNext
	}
	if !passed && p.o.Outbox.claimEarly(e.seq) {
		p.handOut(l, e, fromLive)
	}
}

func (p *Publisher) handOut(l *link, e *entry, src source) {
	m := Message{Topic: e.topic, Payload: e.payload, Retain: e.retain && !p.o.Outbox.superseded(e),
		AtMostOnce: e.kind == KindReading && p.o.ReadingsAtMostOnce}
	l.out <- outgoing{m: m, src: src, seq: e.seq}
	l.n++
	if src == fromLive {
		l.liveN++
	} else {
		l.backN++
	}
}

func (p *Publisher) readFailed(err error) {
	p.mu.Lock()
	logIt, held := p.readLog.allow(time.Now())
	p.mu.Unlock()
	if logIt {
		p.log.Error("mqtt outbox read failed", "err", err, "failures_since_last_report", held)
	}
}

// completed accounts for a message whose PUBACK has come.
func (p *Publisher) completed(h pending) {
	switch h.src {
	case fromQueue:
		p.acked()
	case fromLive, fromBacklog:
		p.o.Outbox.ack(h.seq)
		p.mu.Lock()
		p.outboxAcked++
		if h.src == fromBacklog {
			p.replayed++
		}
		p.mu.Unlock()
		if p.o.OnAck != nil {
			p.o.OnAck(h.m)
		}
	}
}

// acked removes the oldest queued message, whose PUBACK has come.
func (p *Publisher) acked() {
	p.mu.Lock()
	m := p.q.popFront()
	p.published++
	p.mu.Unlock()
	if p.o.OnAck != nil {
		p.o.OnAck(m)
	}
}

// lose gives up a broken connection and puts every message still in
// flight back at the front of the queue, or back in the outbox. PUBACKs
// that came before the break still count, in order, so fewer messages go
// out twice.
func (p *Publisher) lose(l *link, err error) {
	close(l.dead)
	for {
		if !l.hasHead {
			select {
			case l.head = <-l.toks:
				l.hasHead = true
				continue
			default:
			}
			break
		}
		if !isDone(l.head.tok) || l.head.tok.Error() != nil {
			break
		}
		switch l.head.src {
		case fromLive:
			l.liveN--
		case fromBacklog:
			l.backN--
		}
		p.completed(l.head)
		l.hasHead = false
	}
	l.c.Disconnect(0)
	p.mu.Lock()
	resend := p.q.sent
	p.q.unsendAll()
	p.mu.Unlock()
	if p.o.Outbox != nil {
		p.o.Outbox.release()
	}
	p.setDisconnected()
	p.log.Warn("mqtt connection lost", "broker", l.broker, "err", err, "to_resend", resend+l.liveN+l.backN)
}

func (p *Publisher) setDisconnected() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.connected {
		p.connected = false
		p.broker = ""
		p.connCh = make(chan struct{})
	}
}

// sayOffline publishes Offline, retained, and waits up to ConnectTimeout
// for its PUBACK. A clean disconnect does not fire the Will, so this is
// how subscribers learn of a clean stop.
func (p *Publisher) sayOffline(l *link) {
	if p.o.StateTopic == "" {
		return
	}
	tok := l.c.Publish(p.o.StateTopic, 1, true, p.o.Offline)
	t := time.NewTimer(p.o.ConnectTimeout)
	defer t.Stop()
	select {
	case <-tok.Done():
		if err := tok.Error(); err != nil {
			p.log.Warn("mqtt offline state not delivered", "topic", p.o.StateTopic, "err", err)
		}
	case err := <-l.lost:
		p.log.Warn("mqtt offline state not delivered", "topic", p.o.StateTopic, "err", err)
	case <-t.C:
		p.log.Warn("mqtt offline state not acknowledged", "topic", p.o.StateTopic, "timeout", p.o.ConnectTimeout)
	}
}

func isDone(t paho.Token) bool {
	select {
	case <-t.Done():
		return true
	default:
		return false
	}
}

// sleep waits d or until ctx ends.
func sleep(ctx context.Context, d time.Duration) {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
	case <-ctx.Done():
	}
}

// backoff yields waits that double from min to max, each drawn uniformly
// from [d/2, d] so that gateways restarted together do not reconnect in
// step.
type backoff struct {
	min, max, cur time.Duration
}

func (b *backoff) next() time.Duration {
	if b.cur == 0 {
		b.cur = b.min
	} else {
		b.cur = min(2*b.cur, b.max)
	}
	half := b.cur / 2
	return half + rand.N(b.cur-half+1)
}

func (b *backoff) reset() { b.cur = 0 }

// limiter lets a repeated log line through at most once per period and
// counts the ones it held back.
type limiter struct {
	period time.Duration
	last   time.Time
	held   int
	total  int
}

// allow reports whether to log now, and how many were held back since the
// last line logged.
func (l *limiter) allow(now time.Time) (bool, int) {
	l.total++
	if !l.last.IsZero() && now.Sub(l.last) < l.period {
		l.held++
		return false, 0
	}
	held := l.held
	l.last, l.held = now, 0
	return true, held
}

// reset starts over and returns how many events were counted.
func (l *limiter) reset() int {
	n := l.total
	*l = limiter{period: l.period}
	return n
}
