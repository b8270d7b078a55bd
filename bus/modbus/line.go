package modbus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync/atomic"
	"time"
)

// Poll is one read a Line repeats: typically the register block of one head.
type Poll struct {
	Name    string // names the poll in logs and stats, e.g. the head's name
	Request Request
	Period  time.Duration // time between reads, > 0
}

// Result is the outcome of one read, handed to the Line's deliver function.
type Result struct {
	Poll      int       // index into the polls given to NewLine
	Time      time.Time // acquisition time: when the request was sent, from LineConfig.Now
	Registers []uint16  // the registers read; nil on error; valid only during the deliver call
	Err       error     // nil, or the read's error (classify it with Kind)
	Elapsed   time.Duration
}

// Reader reads registers; *Client is the Reader of a Modbus TCP endpoint.
// The slice a Read returns need only stay valid until the next Read.
type Reader interface {
	Read(ctx context.Context, r Request) ([]uint16, error)
	Close() error
}

// LineConfig configures a Line.
type LineConfig struct {
	Name string // names the line (endpoint) in logs and stats
	// Timeout bounds each read; zero or less means DefaultTimeout.
	Timeout time.Duration
	// BackoffMin is the first retry delay of a failing poll; zero or less
	// means the poll's own period. BackoffMax caps the doubling; zero or less
	// means DefaultBackoffMax, and it is never below BackoffMin. BackoffMax is
	// also the least time between two "recovered" lines of one poll.
	BackoffMin, BackoffMax time.Duration
	Logger                 *slog.Logger     // nil discards logs
	Now                    func() time.Time // stamps Result.Time; nil = time.Now
}

// Defaults for LineConfig's zero values.
const (
	DefaultTimeout    = time.Second
	DefaultBackoffMax = 30 * time.Second
)

// Line is the one owner goroutine of a Modbus endpoint (an RS-485 line or a
// TCP connection): it polls every Poll on its own period, one read at a time,
// never concurrently.
//
// Scheduling: each poll has its own next-due time, at first its phase after
// Run starts: poll i of n starts i/n of its period late, so that polls of
// equal period spread over the period instead of arriving together, and the
// readings leave the gateway evenly rather than in bursts. The owner picks the earliest due poll (the lower index on a tie),
// waits for its due time, reads it under context.WithTimeout(ctx, Timeout) and
// delivers the Result. A successful poll is next due at
//
//	max(due + Period, end of the read)
//
// so a poll that fell behind does not burst to catch up. A failing poll is
// next due at max(due + backoff, end of the read), where backoff starts at
// BackoffMin and doubles on each further failure up to BackoffMax: a dead
// head costs at most one Timeout per backoff period while the others keep
// their rate. Every failed read is still delivered (the consumer publishes a
// bad-quality reading); a success resets the backoff.
//
// Logs: a poll that starts failing is logged once, and again each time its
// backoff steps up (not at every read); when it recovers a "recovered" line
// is written. A poll that flaps is quieted: for BackoffMax after a
// "recovered" line, a new outage is not logged (nor its recovery) unless it
// lasts past that quiet period, and the next logged outage reports how many
// went unlogged.
//
// The scheduler runs on the runtime clock (time.Now and timers, which
// testing/synctest fakes); LineConfig.Now only stamps the results.
type Line struct {
	cfg     LineConfig
	r       Reader
	polls   []Poll
	deliver func(Result)
	log     *slog.Logger
	now     func() time.Time
	stats   []pollCounters
	started atomic.Bool
}

type pollCounters struct {
	polls   atomic.Uint64
	errors  [kindCount]atomic.Uint64
	failing atomic.Bool
}

// PollStats are the counters of one poll.
type PollStats struct {
	Name    string
	Polls   uint64                    // reads attempted
	Errors  [KindMalformed + 1]uint64 // failed reads by ErrorKind (Errors[KindNone] stays 0)
	Failing bool                      // the last read failed
}

// Failed is the number of failed reads of any kind.
func (s PollStats) Failed() uint64 {
	var n uint64
	for _, e := range s.Errors {
		n += e
	}
	return n
}

// LineStats are the counters of a Line, one PollStats per poll in poll order.
type LineStats struct {
	Name  string
	Polls []PollStats
}

// NewLine returns a line that reads polls through r and hands each Result to
// deliver. Run starts it. The line owns r: Run closes it.
func NewLine(cfg LineConfig, r Reader, polls []Poll, deliver func(Result)) *Line {
	l := &Line{
		cfg:     cfg,
		r:       r,
		polls:   append([]Poll(nil), polls...),
		deliver: deliver,
		log:     cfg.Logger,
		now:     cfg.Now,
		stats:   make([]pollCounters, len(polls)),
	}
	if l.log == nil {
		l.log = slog.New(slog.DiscardHandler)
	}
	l.log = l.log.With("line", cfg.Name)
	if l.now == nil {
		l.now = time.Now
	}
	if l.deliver == nil {
		l.deliver = func(Result) {}
	}
	if l.cfg.Timeout <= 0 {
		l.cfg.Timeout = DefaultTimeout
	}
	if l.cfg.BackoffMax <= 0 {
		l.cfg.BackoffMax = DefaultBackoffMax
	}
	return l
}

// Stats returns the counters; safe to call from any goroutine at any time.
func (l *Line) Stats() LineStats {
	s := LineStats{Name: l.cfg.Name, Polls: make([]PollStats, len(l.polls))}
	for i := range l.polls {
		c := &l.stats[i]
		p := &s.Polls[i]
		p.Name = l.polls[i].Name
		p.Polls = c.polls.Load()
		for k := range c.errors {
			p.Errors[k] = c.errors[k].Load()
		}
		p.Failing = c.failing.Load()
	}
	return s
}

func (l *Line) validate() error {
	if l.r == nil {
		return errors.New("no reader")
	}
	if len(l.polls) == 0 {
		return errors.New("no polls")
	}
	for i, p := range l.polls {
		if p.Period <= 0 {
			return fmt.Errorf("poll %d (%q): period %v must be positive", i, p.Name, p.Period)
		}
		if err := p.Request.Validate(); err != nil {
			return fmt.Errorf("poll %d (%q): %v: %w", i, p.Name, p.Request, err)
		}
	}
	return nil
}

// pollState is the owner goroutine's schedule and log state of one poll.
type pollState struct {
	due        time.Time
	backoff    time.Duration // current retry delay while failing
	failing    bool
	failures   int       // consecutive failed reads
	since      time.Time // first failure of the current outage
	logged     bool      // the current outage was logged
	quietUntil time.Time // no new outage logged before this
	unlogged   int       // outages not logged since the last logged one
}

// Run polls until ctx is done, then closes the reader and returns ctx.Err().
// It returns early with an error, after closing the reader, when the line
// cannot run: no reader, no polls, a period not above zero or an invalid
// request (naming the poll). Run may be called once; a second call returns
// an error at once and touches nothing. deliver is called from this goroutine
// and must not block.
func (l *Line) Run(ctx context.Context) (err error) {
	if !l.started.CompareAndSwap(false, true) {
		// The reader belongs to the first call: leave it alone.
		return fmt.Errorf("line %q: Run called twice", l.cfg.Name)
	}
	if l.r != nil {
		defer func() {
			if cerr := l.r.Close(); cerr != nil && ctx.Err() == nil && err == nil {
				err = cerr
			}
		}()
	}
	if err := l.validate(); err != nil {
		return fmt.Errorf("line %q: %w", l.cfg.Name, err)
	}
	states := make([]pollState, len(l.polls))
	start := time.Now()
	for i := range states {
		states[i].due = start.Add(phase(i, len(states), l.polls[i].Period))
	}
	timer := time.NewTimer(time.Hour)
	timer.Stop()
	defer timer.Stop()
	for {
		i := 0
		for j := 1; j < len(states); j++ {
			if states[j].due.Before(states[i].due) {
				i = j
			}
		}
		if wait := time.Until(states[i].due); wait > 0 {
			timer.Reset(wait)
			select {
			case <-ctx.Done():
				return ctx.Err()
			case <-timer.C:
			}
		} else if ctx.Err() != nil {
			return ctx.Err()
		}
		if !l.poll(ctx, i, &states[i]) {
			return ctx.Err()
		}
	}
}

// poll reads poll i once, delivers the result and schedules the next read.
// It reports false when ctx ended during the read (nothing is delivered).
func (l *Line) poll(ctx context.Context, i int, st *pollState) bool {
	p := &l.polls[i]
	stamp := l.now()
	start := time.Now()
	rctx, cancel := context.WithTimeout(ctx, l.cfg.Timeout)
	regs, err := l.r.Read(rctx, p.Request)
	cancel()
	elapsed := time.Since(start)
	if ctx.Err() != nil {
		return false
	}
	c := &l.stats[i]
	c.polls.Add(1)
	if err != nil {
		regs = nil
		c.errors[Kind(err)].Add(1)
	}
	c.failing.Store(err != nil)
	l.deliver(Result{Poll: i, Time: stamp, Registers: regs, Err: err, Elapsed: elapsed})

	end := time.Now()
	if err == nil {
		if st.failing {
			l.recovered(p, st, end)
		}
		st.due = later(st.due.Add(p.Period), end)
		return true
	}
	st.failures++
	lo, hi := l.backoffRange(p)
	stepped := true
	switch {
	case !st.failing:
		st.failing, st.since, st.backoff, st.logged = true, end, lo, false
	case st.backoff < hi:
		st.backoff = min(2*st.backoff, hi)
	default:
		stepped = false
	}
	switch {
	case st.logged && stepped:
		l.log.Warn("poll still failing", "poll", p.Name, "kind", Kind(err).String(), "err", err,
			"failures", st.failures, "retry_in", st.backoff)
	case !st.logged && !end.Before(st.quietUntil):
		// The first failure of an outage, or the first one after a quiet
		// period that began when the poll last recovered.
		st.logged = true
		earlier := st.unlogged
		if st.failures > 1 {
			earlier-- // this outage was counted when it began
		}
		l.log.Warn("poll failing", "poll", p.Name, "kind", Kind(err).String(), "err", err,
			"failures", st.failures, "retry_in", st.backoff, "unlogged_outages", earlier)
		st.unlogged = 0
	case !st.logged && st.failures == 1:
		st.unlogged++
	}
	st.due = later(st.due.Add(st.backoff), end)
	return true
}

func (l *Line) recovered(p *Poll, st *pollState, now time.Time) {
	if st.logged {
		l.log.Info("poll recovered", "poll", p.Name, "failures", st.failures, "down_for", now.Sub(st.since))
		_, hi := l.backoffRange(p)
		st.quietUntil = now.Add(hi)
	}
	st.failing, st.failures, st.backoff, st.logged = false, 0, 0, false
}

// backoffRange is the first and the largest retry delay of poll p.
func (l *Line) backoffRange(p *Poll) (lo, hi time.Duration) {
	lo = l.cfg.BackoffMin
	if lo <= 0 {
		lo = p.Period
	}
	return lo, max(l.cfg.BackoffMax, lo)
}

func later(a, b time.Time) time.Time {
	if a.After(b) {
		return a
	}
	return b
}

// phase is how long after the start poll i of n first falls due: i/n of
// its period.
func phase(i, n int, period time.Duration) time.Duration {
	return time.Duration(int64(period) / int64(n) * int64(i))
}
