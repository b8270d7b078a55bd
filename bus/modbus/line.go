package modbus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync/atomic"
	"time"
)

// Poll is what a Line repeats: typically the register blocks of one head
// (see Coalesce), read back to back.
type Poll struct {
	Name     string        // names the poll in logs and stats, e.g. the head's name
	Requests []Request     // at least one; read in order, one transaction each
	Period   time.Duration // time between polls, > 0
}

// Result is the outcome of one poll, handed to the Line's deliver function.
type Result struct {
	Poll int // index into the polls given to NewLine
	// Time is the acquisition time, from LineConfig.Now: when the poll's
	// first request was sent or, in a batch, when the answer before that
	// request's answer arrived (the batch's send time for the first
	// answer), the earliest a server that answers in turn can have read it.
	Time time.Time
	// Blocks holds the registers read, one slice per request of the poll in
	// its order; nil on error. The slices are the Line's and valid only
	// during the deliver call.
	Blocks  [][]uint16
	Err     error         // nil, or the error of the transaction that failed the poll (classify it with Kind)
	Elapsed time.Duration // from the first request to the end of the last transaction
}

// Reader reads registers; *Client is the Reader of a Modbus TCP endpoint,
// *RTUClient that of a serial line. The slice a Read returns need only stay
// valid until the next Read.
type Reader interface {
	Read(ctx context.Context, r Request) ([]uint16, error)
	Close() error
}

// LineConfig configures a Line.
type LineConfig struct {
	Name string // names the line (endpoint) in logs and stats
	// Timeout bounds each transaction (one request of a poll); zero or less
	// means DefaultTimeout.
	Timeout time.Duration
	// BackoffMin is the first retry delay of a failing poll; zero or less
	// means the poll's own period. BackoffMax caps the doubling; zero or less
	// means DefaultBackoffMax, and it is never below BackoffMin. BackoffMax is
	// also the least time between two "recovered" lines of one poll.
	BackoffMin, BackoffMax time.Duration
	Logger                 *slog.Logger     // nil discards logs
	Now                    func() time.Time // stamps Result.Time; nil = time.Now
	// InFlight is how many requests the line may have in flight at once.
	// Zero or one reads one transaction at a time. Above one the Reader
	// must be a BatchReader (a Modbus TCP Client), and polls that fall due
	// together are read in batches of up to InFlight requests (see Line).
	InFlight int
}

// Defaults for LineConfig's zero values.
const (
	DefaultTimeout    = time.Second
	DefaultBackoffMax = 30 * time.Second
)

// Line is the one owner goroutine of a Modbus endpoint (an RS-485 line or a
// TCP connection): it polls every Poll on its own period, one transaction at
// a time unless LineConfig.InFlight allows more (below).
//
// A poll reads its requests back to back, each under its own
// context.WithTimeout(ctx, Timeout); the first failure ends the poll and its
// error is delivered. A damaged frame (KindFrame: CRC mismatch, truncated or
// garbled, which is what line noise does) is retried once at once before it
// fails the poll; both attempts are counted. So a failing poll costs at most
// one Timeout, and a retry only follows a frame error.
//
// Scheduling: each poll has its own next-due time, at first the start of
// Run and then on its period's grid (the start of Run plus a whole number
// of periods), so polls of equal period fall due together and are read
// back to back, and fall due together again after one of them stalled or
// failed. Heads on one line are then sampled within a few transactions of
// each other (readings of two heads that watch one target compare
// closely, as a deviation alarm needs), and the gateway wakes once per
// period rather than once per poll: at 64 heads × 10 Hz that took 2.5
// times less CPU than spreading the polls over the period (BENCHMARKS.md).
// The owner picks the earliest due poll (the lower index on a tie), waits
// for its due time, reads it and delivers the Result. The Line adds no
// pause of its own between transactions: on a serial line the only gap is
// the client's t3.5.
//
// A successful poll is next due at the first slot of its grid after its
// due time and not before the end of the poll, so a poll that fell behind
// skips the slots it missed rather than burst to catch up. A failing poll
// is next due at the first slot at or after due + backoff, not before the
// end of the poll, where backoff starts at BackoffMin and doubles on each
// further failure up to BackoffMax: a dead head costs at most one Timeout
// per backoff period while the others keep their rate (and a serial
// device that vanished is reopened at that pace, since the client reopens
// it on the next Read). Only a poll that itself took longer than its
// period leaves its grid: it is due again at max(due + Period or backoff,
// end of the poll), since the line cannot keep its rate and waiting for a
// slot would lose more; it rejoins the grid at its next quicker read.
// Every failed poll is still delivered (the consumer publishes a
// bad-quality reading); a success resets the backoff.
//
// Logs: a poll that starts failing is logged once, and again each time its
// backoff steps up (not at every poll); when it recovers a "recovered" line
// is written. A poll that flaps is quieted: for BackoffMax after a
// "recovered" line, a new outage is not logged (nor its recovery) unless it
// lasts past that quiet period, and the next logged outage reports how many
// went unlogged.
//
// Batches: with InFlight above one, the owner reads every poll due when it
// wakes, their requests in order, in batches of up to InFlight requests
// that go out together and are answered in any order (BatchReader). A
// poll is delivered as soon as its last request is resolved, so a silent
// head holds up the next batch for one Timeout, not the readings of its
// own batch (the reader gives each request Timeout from the answer before
// it, and a batch takes at most its number of requests × Timeout). The
// first failed request in a poll's order is its error; a damaged frame is
// read again once, on its own, after its batch; Result.Time says when a
// batch's poll was read. At 64 heads × 10 Hz on one endpoint, batches of
// 64 took 2.6 times less CPU than one at a time (BENCHMARKS.md).
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
	line    lineCounters
	started atomic.Bool
	blocks  [][][]uint16 // per poll, per request: the registers handed to deliver
	batch   batchState   // pollBatches' storage
	origin  time.Time    // the start of Run: every poll's grid begins here
}

type pollCounters struct {
	polls        atomic.Uint64
	failures     atomic.Uint64
	transactions atomic.Uint64
	retries      atomic.Uint64
	errors       [kindCount]atomic.Uint64
	failing      atomic.Bool
}

type lineCounters struct {
	count   atomic.Uint64
	sum     atomic.Int64 // nanoseconds
	busy    atomic.Int64 // nanoseconds the line had a transaction in flight
	buckets [len(TransactionTimeBounds) + 1]atomic.Uint64
	start   atomic.Pointer[time.Time] // when Run started
	end     atomic.Pointer[time.Time] // when Run returned
}

// TransactionTimeBounds are the upper bounds of the buckets of
// TransactionTimes: 1 ms to 5 s in 1-2-5 steps, spanning a 10-register read
// at 115200 baud (6.7 ms on the wire, LIBRARIES.md) up to timeouts of
// several seconds. Treat it as read-only.
var TransactionTimeBounds = [...]time.Duration{
	time.Millisecond, 2 * time.Millisecond, 5 * time.Millisecond,
	10 * time.Millisecond, 20 * time.Millisecond, 50 * time.Millisecond,
	100 * time.Millisecond, 200 * time.Millisecond, 500 * time.Millisecond,
	time.Second, 2 * time.Second, 5 * time.Second,
}

// TransactionTimes is a histogram of how long transactions took (one
// request and its answer, or its failure), in the form of a Prometheus
// histogram: Buckets[i] counts the transactions that took at most
// TransactionTimeBounds[i] (cumulative), Count all of them (the +Inf bucket)
// and Sum their total time.
type TransactionTimes struct {
	Count   uint64
	Sum     time.Duration
	Buckets [len(TransactionTimeBounds)]uint64
}

// Mean is Sum / Count, or zero without transactions.
func (h TransactionTimes) Mean() time.Duration {
	if h.Count == 0 {
		return 0
	}
	return h.Sum / time.Duration(h.Count)
}

// PollStats are the counters of one poll.
type PollStats struct {
	Name         string
	Polls        uint64 // polls completed (failed ones included)
	Failures     uint64 // polls delivered with an error
	Transactions uint64 // transactions of this poll, retries included
	Retries      uint64 // transactions repeated after a frame error
	// Errors counts failed transactions by ErrorKind (Errors[KindNone]
	// stays 0); a frame error that its retry repaired counts too.
	Errors  [KindFrame + 1]uint64
	Failing bool // the last poll failed
}

// LineStats are the counters of a Line: one PollStats per poll in poll
// order, and the line's transaction times.
type LineStats struct {
	Name  string
	Polls []PollStats
	Times TransactionTimes
	// Running is how long Run has been running (until it returned), zero
	// before it starts.
	Running time.Duration
	// BusyTime is how long the line had a transaction in flight.
	BusyTime time.Duration
}

// Busy is the fraction of Running the line had a transaction in flight,
// BusyTime / Running: near 1 the line has no room for more heads or
// shorter periods. One at a time, BusyTime is Times.Sum; in batches it is
// the time from each batch's write to its last answer. Zero before Run
// starts.
func (s LineStats) Busy() float64 {
	if s.Running <= 0 {
		return 0
	}
	return float64(s.BusyTime) / float64(s.Running)
}

// NewLine returns a line that reads polls through r and hands each Result to
// deliver. Run starts it. The line owns r: Run closes it.
func NewLine(cfg LineConfig, r Reader, polls []Poll, deliver func(Result)) *Line {
	l := &Line{
		cfg:     cfg,
		r:       r,
		polls:   make([]Poll, len(polls)),
		deliver: deliver,
		log:     cfg.Logger,
		now:     cfg.Now,
		stats:   make([]pollCounters, len(polls)),
	}
	for i, p := range polls {
		p.Requests = append([]Request(nil), p.Requests...)
		l.polls[i] = p
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
		p.Failures = c.failures.Load()
		p.Transactions = c.transactions.Load()
		p.Retries = c.retries.Load()
		for k := range c.errors {
			p.Errors[k] = c.errors[k].Load()
		}
		p.Failing = c.failing.Load()
	}
	lc := &l.line
	s.Times.Count = lc.count.Load()
	s.Times.Sum = time.Duration(lc.sum.Load())
	s.BusyTime = time.Duration(lc.busy.Load())
	var cum uint64
	for i := range s.Times.Buckets {
		cum += lc.buckets[i].Load()
		s.Times.Buckets[i] = cum
	}
	if start := lc.start.Load(); start != nil {
		if end := lc.end.Load(); end != nil {
			s.Running = end.Sub(*start)
		} else {
			s.Running = time.Since(*start)
		}
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
	if _, ok := l.r.(BatchReader); l.cfg.InFlight > 1 && !ok {
		return fmt.Errorf("%d requests in flight need a reader that can batch them (Modbus TCP), not %T", l.cfg.InFlight, l.r)
	}
	for i, p := range l.polls {
		if p.Period <= 0 {
			return fmt.Errorf("poll %d (%q): period %v must be positive", i, p.Name, p.Period)
		}
		if len(p.Requests) == 0 {
			return fmt.Errorf("poll %d (%q): no requests", i, p.Name)
		}
		for k, r := range p.Requests {
			if err := r.Validate(); err != nil {
				return fmt.Errorf("poll %d (%q) request %d: %v: %w", i, p.Name, k, r, err)
			}
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
// cannot run: no reader, no polls, a period not above zero, a poll without
// requests or an invalid request (naming the poll). Run may be called once;
// a second call returns an error at once and touches nothing. deliver is
// called from this goroutine and must not block.
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
	l.blocks = make([][][]uint16, len(l.polls))
	for i, p := range l.polls {
		l.blocks[i] = make([][]uint16, len(p.Requests))
		for k, r := range p.Requests {
			l.blocks[i][k] = make([]uint16, 0, r.Quantity)
		}
	}
	states := make([]pollState, len(l.polls))
	start := time.Now()
	l.origin = start
	l.line.start.Store(&start)
	defer func() {
		end := time.Now()
		l.line.end.Store(&end)
	}()
	for i := range states {
		states[i].due = start
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
		if l.cfg.InFlight > 1 {
			if !l.pollBatches(ctx, states) {
				return ctx.Err()
			}
		} else if !l.poll(ctx, i, &states[i]) {
			return ctx.Err()
		}
	}
}

// transact reads one request under its own timeout and records the
// transaction. When ctx ended during the read it records nothing and
// returns ctx's error.
func (l *Line) transact(ctx context.Context, c *pollCounters, r Request) ([]uint16, error) {
	start := time.Now()
	rctx, cancel := context.WithTimeout(ctx, l.cfg.Timeout)
	regs, err := l.r.Read(rctx, r)
	cancel()
	if ctx.Err() != nil {
		return nil, ctx.Err()
	}
	if err == nil && len(regs) != int(r.Quantity) {
		err = fmt.Errorf("%v: %w: %d registers for %d asked", r, ErrShortResponse, len(regs), r.Quantity)
	}
	d := time.Since(start)
	l.record(c, d, err)
	l.line.busy.Add(int64(d))
	return regs, err
}

// record counts one transaction that took d and ended in err.
func (l *Line) record(c *pollCounters, d time.Duration, err error) {
	lc := &l.line
	lc.count.Add(1)
	lc.sum.Add(int64(d))
	b := 0
	for b < len(TransactionTimeBounds) && d > TransactionTimeBounds[b] {
		b++
	}
	lc.buckets[b].Add(1)
	c.transactions.Add(1)
	if err != nil {
		c.errors[Kind(err)].Add(1)
	}
}

// poll reads poll i once, delivers the result and schedules the next poll.
// It reports false when ctx ended during the poll (nothing is delivered).
func (l *Line) poll(ctx context.Context, i int, st *pollState) bool {
	p := &l.polls[i]
	c := &l.stats[i]
	blocks := l.blocks[i]
	stamp := l.now()
	start := time.Now()
	var err error
	for k, r := range p.Requests {
		var regs []uint16
		regs, err = l.transact(ctx, c, r)
		if ctx.Err() == nil && Kind(err) == KindFrame {
			c.retries.Add(1)
			regs, err = l.transact(ctx, c, r)
		}
		if ctx.Err() != nil {
			return false
		}
		if err != nil {
			break
		}
		blocks[k] = append(blocks[k][:0], regs...)
	}
	l.finish(i, st, Result{Poll: i, Time: stamp, Blocks: blocks, Err: err, Elapsed: time.Since(start)})
	return true
}

// finish counts and delivers the result of poll i and schedules its next
// read.
func (l *Line) finish(i int, st *pollState, res Result) {
	p := &l.polls[i]
	c := &l.stats[i]
	err := res.Err
	c.polls.Add(1)
	if err != nil {
		c.failures.Add(1)
		res.Blocks = nil
	}
	c.failing.Store(err != nil)
	l.deliver(res)

	end := time.Now()
	if err == nil {
		if st.failing {
			l.recovered(p, st, end)
		}
		st.due = l.next(p, res, st.due, 0, end)
		return
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
	st.due = l.next(p, res, st.due, st.backoff, end)
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

// next is when poll p, due at due and read until end with result res, is
// next due: on its grid (the start of Run plus a whole number of its
// periods), at the first slot after due when it succeeded, at the first
// slot at or after due + backoff when it failed, and not before end. A
// poll that took longer than its period is due again at
// max(due + step, end), off its grid: the line cannot keep its rate.
func (l *Line) next(p *Poll, res Result, due time.Time, backoff time.Duration, end time.Time) time.Time {
	if res.Elapsed >= p.Period {
		return later(due.Add(max(backoff, p.Period)), end)
	}
	t := l.slotFrom(p, due.Add(1)) // the first slot after due
	if res.Err != nil {
		t = l.slotFrom(p, due.Add(backoff))
	}
	return later(t, l.slotFrom(p, end))
}

// slotFrom is the first slot of poll p's grid at or after t.
func (l *Line) slotFrom(p *Poll, t time.Time) time.Time {
	d := t.Sub(l.origin)
	if d <= 0 {
		return l.origin
	}
	return l.origin.Add((d + p.Period - 1) / p.Period * p.Period)
}

func later(a, b time.Time) time.Time {
	if a.After(b) {
		return a
	}
	return b
}
