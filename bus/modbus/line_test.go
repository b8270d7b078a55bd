package modbus_test

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"sync"
	"testing"
	"testing/synctest"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
)

// behaviour answers the n-th read (from 0) of one poll.
type behaviour func(ctx context.Context, n int) ([]uint16, error)

func ok(ctx context.Context, n int) ([]uint16, error) { return []uint16{uint16(n)}, nil }

// dead never answers: the read ends with the context.
func dead(ctx context.Context, n int) ([]uint16, error) {
	<-ctx.Done()
	return nil, fmt.Errorf("%w: dead head", modbus.ErrTimeout)
}

// failFirst fails the first k reads at once with a connection error.
func failFirst(k int) behaviour {
	return func(ctx context.Context, n int) ([]uint16, error) {
		if n < k {
			return nil, fmt.Errorf("%w: refused", modbus.ErrConnection)
		}
		return []uint16{uint16(n)}, nil
	}
}

// slowFirst takes d over the first read.
func slowFirst(d time.Duration) behaviour {
	return func(ctx context.Context, n int) ([]uint16, error) {
		if n == 0 {
			t := time.NewTimer(d)
			defer t.Stop()
			select {
			case <-t.C:
			case <-ctx.Done():
				return nil, fmt.Errorf("%w: slow", modbus.ErrTimeout)
			}
		}
		return []uint16{uint16(n)}, nil
	}
}

// fakeReader serves each request address with its own behaviour and records
// when each read started, as offsets from t0 on the bubble's clock.
type fakeReader struct {
	t0     time.Time
	by     map[uint16]behaviour
	mu     sync.Mutex
	starts map[uint16][]time.Duration
	closed bool
}

func newFakeReader(by map[uint16]behaviour) *fakeReader {
	return &fakeReader{t0: time.Now(), by: by, starts: make(map[uint16][]time.Duration)}
}

func (f *fakeReader) Read(ctx context.Context, r modbus.Request) ([]uint16, error) {
	f.mu.Lock()
	n := len(f.starts[r.Address])
	f.starts[r.Address] = append(f.starts[r.Address], time.Since(f.t0))
	b := f.by[r.Address]
	f.mu.Unlock()
	return b(ctx, n)
}

func (f *fakeReader) Close() error {
	f.mu.Lock()
	f.closed = true
	f.mu.Unlock()
	return nil
}

func (f *fakeReader) times(addr uint16) []time.Duration {
	f.mu.Lock()
	defer f.mu.Unlock()
	return slices.Clone(f.starts[addr])
}

func ms(v ...int) []time.Duration {
	d := make([]time.Duration, len(v))
	for i, x := range v {
		d[i] = time.Duration(x) * time.Millisecond
	}
	return d
}

func poll(name string, addr uint16, period time.Duration) modbus.Poll {
	return modbus.Poll{Name: name, Requests: []modbus.Request{{Unit: 1, Address: addr, Quantity: 1}}, Period: period}
}

// runFor runs the line for d on the bubble's clock and returns Run's error.
func runFor(t *testing.T, l *modbus.Line, d time.Duration) error {
	t.Helper()
	ctx, cancel := context.WithCancel(t.Context())
	errc := make(chan error, 1)
	go func() { errc <- l.Run(ctx) }()
	<-time.After(d)
	cancel()
	return <-errc
}

// recorder is a slog.Handler that keeps the records.
type recorder struct {
	mu   sync.Mutex
	recs []slog.Record
}

func (r *recorder) Enabled(context.Context, slog.Level) bool { return true }
func (r *recorder) Handle(_ context.Context, rec slog.Record) error {
	r.mu.Lock()
	r.recs = append(r.recs, rec.Clone())
	r.mu.Unlock()
	return nil
}
func (r *recorder) WithAttrs([]slog.Attr) slog.Handler { return r }
func (r *recorder) WithGroup(string) slog.Handler      { return r }

func (r *recorder) messages() []string {
	r.mu.Lock()
	defer r.mu.Unlock()
	var m []string
	for _, rec := range r.recs {
		m = append(m, rec.Message)
	}
	return m
}

func (r *recorder) attr(i int, key string) slog.Value {
	r.mu.Lock()
	defer r.mu.Unlock()
	var v slog.Value
	r.recs[i].Attrs(func(a slog.Attr) bool {
		if a.Key == key {
			v = a.Value
			return false
		}
		return true
	})
	return v
}

func TestLineKeepsEachPollsPeriod(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: ok, 2: ok})
		var results []modbus.Result
		l := modbus.NewLine(modbus.LineConfig{Name: "l"}, fr,
			[]modbus.Poll{poll("a", 1, 100*time.Millisecond), poll("b", 2, 250*time.Millisecond)},
			func(r modbus.Result) { results = append(results, r) })
		if err := runFor(t, l, 1050*time.Millisecond); !errors.Is(err, context.Canceled) {
			t.Fatalf("Run = %v, want context.Canceled", err)
		}
		if got, want := fr.times(1), ms(0, 100, 200, 300, 400, 500, 600, 700, 800, 900, 1000); !slices.Equal(got, want) {
			t.Errorf("poll a read at %v, want %v", got, want)
		}
		// Both start together, at Run's start.
		if got, want := fr.times(2), ms(0, 250, 500, 750, 1000); !slices.Equal(got, want) {
			t.Errorf("poll b read at %v, want %v", got, want)
		}
		if len(results) != 16 {
			t.Fatalf("%d results delivered, want 16", len(results))
		}
		if r := results[0]; r.Poll != 0 || r.Err != nil || len(r.Blocks) != 1 || len(r.Blocks[0]) != 1 {
			t.Errorf("first result = %+v", r)
		}
		if !fr.closed {
			t.Errorf("reader not closed after Run")
		}
	})
}

// A dead head costs one timeout per backoff period (100, 200, 400, 800 ms,
// capped), every failure is delivered, and the healthy poll keeps its rate.
func TestLineDeadHeadBacksOff(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: dead, 2: ok})
		var results []modbus.Result
		l := modbus.NewLine(modbus.LineConfig{Name: "l", Timeout: 50 * time.Millisecond, BackoffMax: 800 * time.Millisecond},
			fr, []modbus.Poll{poll("dead", 1, 100*time.Millisecond), poll("alive", 2, 100*time.Millisecond)},
			func(r modbus.Result) { results = append(results, r) })
		runFor(t, l, 3020*time.Millisecond)

		// Reads start at due; a failure is next due at max(due+backoff, end).
		if got, want := fr.times(1), ms(0, 100, 300, 700, 1500, 2300); !slices.Equal(got, want) {
			t.Errorf("dead head read at %v, want %v", got, want)
		}
		alive := fr.times(2)
		if len(alive) < 29 {
			t.Errorf("healthy poll read %d times in 3 s, want at least 29: %v", len(alive), alive)
		}
		for i := 1; i < len(alive); i++ {
			if gap := alive[i] - alive[i-1]; gap > 150*time.Millisecond {
				t.Errorf("healthy poll waited %v between reads at %v and %v", gap, alive[i-1], alive[i])
			}
		}
		var deadResults int
		for _, r := range results {
			if r.Poll != 0 {
				continue
			}
			deadResults++
			if modbus.Kind(r.Err) != modbus.KindTimeout || r.Blocks != nil || r.Elapsed != 50*time.Millisecond {
				t.Errorf("dead head result = %+v, want a 50 ms timeout without registers", r)
			}
		}
		if deadResults != 6 {
			t.Errorf("%d dead-head results delivered, want 6", deadResults)
		}
		s := l.Stats()
		if s.Name != "l" || s.Polls[0].Name != "dead" || s.Polls[0].Polls != 6 ||
			s.Polls[0].Errors[modbus.KindTimeout] != 6 || s.Polls[0].Failures != 6 || !s.Polls[0].Failing {
			t.Errorf("dead head stats = %+v", s.Polls[0])
		}
		if s.Polls[1].Failures != 0 || s.Polls[1].Failing || s.Polls[1].Polls != uint64(len(alive)) {
			t.Errorf("healthy poll stats = %+v", s.Polls[1])
		}
	})
}

// Failures are logged at the first failure and at each backoff step, not at
// every read; recovery resets the backoff and is logged once.
func TestLineRecoveryResetsBackoffAndLogsOnce(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: failFirst(6)})
		rec := &recorder{}
		var errs []error
		l := modbus.NewLine(modbus.LineConfig{Name: "l", BackoffMax: 400 * time.Millisecond, Logger: slog.New(rec)},
			fr, []modbus.Poll{poll("a", 1, 100*time.Millisecond)},
			func(r modbus.Result) { errs = append(errs, r.Err) })
		runFor(t, l, 2150*time.Millisecond)

		// Backoff 100, 200, 400, 400, 400, 400 ms, then the period again.
		if got, want := fr.times(1), ms(0, 100, 300, 700, 1100, 1500, 1900, 2000, 2100); !slices.Equal(got, want) {
			t.Errorf("reads at %v, want %v", got, want)
		}
		want := []string{"poll failing", "poll still failing", "poll still failing", "poll recovered"}
		if got := rec.messages(); !slices.Equal(got, want) {
			t.Fatalf("logs = %q, want %q", got, want)
		}
		if v := rec.attr(2, "retry_in"); v.Duration() != 400*time.Millisecond {
			t.Errorf("last step retry_in = %v, want 400ms", v)
		}
		if v := rec.attr(3, "failures"); v.Int64() != 6 {
			t.Errorf("recovered failures = %v, want 6", v)
		}
		if v := rec.attr(3, "down_for"); v.Duration() != 1900*time.Millisecond {
			t.Errorf("recovered down_for = %v, want 1.9s", v)
		}
		if len(errs) != 9 || errs[5] == nil || errs[6] != nil {
			t.Errorf("delivered errors = %v", errs)
		}
		if s := l.Stats().Polls[0]; s.Errors[modbus.KindConnection] != 6 || s.Failing {
			t.Errorf("stats = %+v", s)
		}
	})
}

// A flapping poll is quieted for BackoffMax after each logged recovery.
func TestLineQuietsFlapping(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		flap := func(ctx context.Context, n int) ([]uint16, error) {
			if n%2 == 0 {
				return nil, fmt.Errorf("%w: flap", modbus.ErrConnection)
			}
			return []uint16{1}, nil
		}
		fr := newFakeReader(map[uint16]behaviour{1: flap})
		rec := &recorder{}
		l := modbus.NewLine(modbus.LineConfig{Name: "l", BackoffMax: time.Second, Logger: slog.New(rec)},
			fr, []modbus.Poll{poll("a", 1, 100*time.Millisecond)}, nil)
		runFor(t, l, 1350*time.Millisecond)

		// Fails at 0, 200, ..., 1200; the outages at 200..1000 fall in the
		// quiet second after the recovery at 100.
		want := []string{"poll failing", "poll recovered", "poll failing", "poll recovered"}
		if got := rec.messages(); !slices.Equal(got, want) {
			t.Fatalf("logs = %q, want %q", got, want)
		}
		if v := rec.attr(2, "unlogged_outages"); v.Int64() != 5 {
			t.Errorf("unlogged_outages = %v, want 5", v)
		}
	})
}

// An outage that begins in the quiet period is logged once it outlasts it.
func TestLineLogsOutageOutlastingQuietPeriod(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		b := func(ctx context.Context, n int) ([]uint16, error) {
			if n == 1 {
				return []uint16{1}, nil
			}
			return nil, fmt.Errorf("%w: down", modbus.ErrConnection)
		}
		fr := newFakeReader(map[uint16]behaviour{1: b})
		rec := &recorder{}
		l := modbus.NewLine(modbus.LineConfig{Name: "l", BackoffMax: time.Second, Logger: slog.New(rec)},
			fr, []modbus.Poll{poll("a", 1, 100*time.Millisecond)}, nil)
		runFor(t, l, 2000*time.Millisecond)

		// Fails at 0, recovers at 100 (quiet until 1100), fails from 200 on
		// at 200, 300, 500, 900 (quiet), 1700 (logged).
		if got, want := fr.times(1), ms(0, 100, 200, 300, 500, 900, 1700); !slices.Equal(got, want) {
			t.Errorf("reads at %v, want %v", got, want)
		}
		want := []string{"poll failing", "poll recovered", "poll failing"}
		if got := rec.messages(); !slices.Equal(got, want) {
			t.Fatalf("logs = %q, want %q", got, want)
		}
		if v := rec.attr(2, "failures"); v.Int64() != 5 {
			t.Errorf("failures = %v, want 5", v)
		}
		if v := rec.attr(2, "unlogged_outages"); v.Int64() != 0 {
			t.Errorf("unlogged_outages = %v, want 0", v)
		}
	})
}

// A poll that fell behind does not burst to catch up: the read that took
// 350 ms is followed by one at once, and the next is on the period's grid.
func TestLineDoesNotBurstAfterStall(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: slowFirst(350 * time.Millisecond)})
		l := modbus.NewLine(modbus.LineConfig{Name: "l"}, fr, []modbus.Poll{poll("a", 1, 100*time.Millisecond)}, nil)
		runFor(t, l, 580*time.Millisecond)
		if got, want := fr.times(1), ms(0, 350, 400, 500); !slices.Equal(got, want) {
			t.Errorf("reads at %v, want %v", got, want)
		}
	})
}

// Polls of one period that fell apart (one stalled, one timed out and
// backed off by a period that is no multiple of the other's) fall due
// together again afterwards, as at the start: a gateway that runs for
// years keeps its heads sampled together and wakes once a period.
func TestLinePollsRealignAfterStallAndBackoff(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: slowFirst(130 * time.Millisecond), 2: failFirst(1), 3: ok})
		l := modbus.NewLine(modbus.LineConfig{Name: "l", BackoffMin: 70 * time.Millisecond}, fr, []modbus.Poll{
			poll("stalls", 1, 100*time.Millisecond), poll("fails", 2, 100*time.Millisecond), poll("steady", 3, 100*time.Millisecond),
		}, nil)
		runFor(t, l, 450*time.Millisecond)
		// stalls took 130 ms, longer than its period: read again at once
		// (130), then on the grid (200). fails: failed at 130, backoff
		// 70 → 200. steady: due at 0, read at 130 after the others, next
		// at 200.
		for addr, want := range map[uint16][]time.Duration{1: ms(0, 130, 200, 300, 400), 2: ms(130, 200, 300, 400), 3: ms(130, 200, 300, 400)} {
			if got := fr.times(addr); !slices.Equal(got, want) {
				t.Errorf("poll at address %d read at %v, want %v", addr, got, want)
			}
		}
	})
}

func TestLineStopsMidReadWithoutDelivering(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: dead})
		delivered := 0
		l := modbus.NewLine(modbus.LineConfig{Name: "l", Timeout: time.Hour}, fr,
			[]modbus.Poll{poll("a", 1, time.Second)}, func(modbus.Result) { delivered++ })
		err := runFor(t, l, 30*time.Millisecond)
		if !errors.Is(err, context.Canceled) {
			t.Errorf("Run = %v, want context.Canceled", err)
		}
		if delivered != 0 {
			t.Errorf("%d results delivered after cancel, want 0", delivered)
		}
		if !fr.closed {
			t.Errorf("reader not closed")
		}
	})
}

func TestLineSecondRunLeavesReaderAlone(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: ok})
		l := modbus.NewLine(modbus.LineConfig{Name: "l"}, fr, []modbus.Poll{poll("a", 1, time.Second)}, nil)
		ctx, cancel := context.WithCancel(t.Context())
		errc := make(chan error, 1)
		go func() { errc <- l.Run(ctx) }()
		synctest.Wait()
		if err := l.Run(t.Context()); err == nil || err.Error() != `line "l": Run called twice` {
			t.Errorf("second Run = %v", err)
		}
		if fr.closed {
			t.Errorf("second Run closed the running line's reader")
		}
		cancel()
		if err := <-errc; !errors.Is(err, context.Canceled) || !fr.closed {
			t.Errorf("first Run = %v, reader closed = %v", err, fr.closed)
		}
	})
}

func TestLineStampsWithConfiguredClock(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		stamp := time.Date(2024, 5, 6, 7, 8, 9, 0, time.UTC)
		fr := newFakeReader(map[uint16]behaviour{1: ok})
		var got []time.Time
		l := modbus.NewLine(modbus.LineConfig{Name: "l", Now: func() time.Time { return stamp }}, fr,
			[]modbus.Poll{poll("a", 1, 100*time.Millisecond)}, func(r modbus.Result) { got = append(got, r.Time) })
		runFor(t, l, 250*time.Millisecond)
		if len(got) != 3 || !got[0].Equal(stamp) || !got[2].Equal(stamp) {
			t.Errorf("result times = %v, want 3 × %v", got, stamp)
		}
	})
}

func TestLineRejectsBadPolls(t *testing.T) {
	cases := []struct {
		name  string
		polls []modbus.Poll
		want  string
	}{
		{"none", nil, `line "l": no polls`},
		{"zero period", []modbus.Poll{poll("a", 1, 0)}, `line "l": poll 0 ("a"): period 0s must be positive`},
		{"zero quantity", []modbus.Poll{{Name: "b", Requests: []modbus.Request{{Unit: 1, Quantity: 1}, {Unit: 1}}, Period: time.Second}},
			`line "l": poll 0 ("b") request 1: read input registers unit=1 addr=0 qty=0: modbus: invalid request: quantity 0 outside 1..125`},
		{"no requests", []modbus.Poll{{Name: "c", Period: time.Second}}, `line "l": poll 0 ("c"): no requests`},
	}
	for _, c := range cases {
		fr := newFakeReader(nil)
		l := modbus.NewLine(modbus.LineConfig{Name: "l"}, fr, c.polls, nil)
		err := l.Run(t.Context())
		if err == nil || err.Error() != c.want {
			t.Errorf("%s: Run = %v, want %q", c.name, err, c.want)
		}
		if !fr.closed {
			t.Errorf("%s: reader not closed", c.name)
		}
	}
	if err := modbus.NewLine(modbus.LineConfig{Name: "l"}, nil, []modbus.Poll{poll("a", 1, time.Second)}, nil).Run(t.Context()); err == nil {
		t.Errorf("Run without reader succeeded")
	}
}

// Stats may be read from other goroutines while the line runs (run with -race).
func TestLineStatsConcurrent(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: failFirst(3)})
		l := modbus.NewLine(modbus.LineConfig{Name: "l"}, fr, []modbus.Poll{poll("a", 1, 10*time.Millisecond)}, nil)
		ctx, cancel := context.WithCancel(t.Context())
		done := make(chan struct{})
		go func() {
			defer close(done)
			l.Run(ctx)
		}()
		var last uint64
		for range 49 { // to 343 ms, between reads
			<-time.After(7 * time.Millisecond)
			s := l.Stats().Polls[0]
			if s.Polls < last {
				t.Fatalf("polls went back from %d to %d", last, s.Polls)
			}
			last = s.Polls
		}
		cancel()
		<-done
		// Reads at 0, 10, 30 (failing, backoff 10, 20, 40), then 70, 80, ..., 340.
		if s := l.Stats().Polls[0]; s.Polls != 31 || s.Errors[modbus.KindConnection] != 3 {
			t.Errorf("stats = %+v, want 31 polls, 3 connection errors", s)
		}
	})
}

// The line and the real Client together, over in-memory pipes to modbustest:
// one healthy head, one that never answers.
func TestLineWithClient(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		srv := modbustest.NewPipeServer(t)
		srv.Set(1, modbus.InputRegisters, 0, 0x42F6, 0xE979)
		srv.Set(2, modbus.InputRegisters, 0, 1)
		srv.SetFault(2, modbustest.Fault{Kind: modbustest.Silent})
		c := modbus.NewClient(srv.Dial, "pipe", time.Second)
		polls := []modbus.Poll{
			{Name: "good", Requests: []modbus.Request{{Unit: 1, Quantity: 2}}, Period: 100 * time.Millisecond},
			{Name: "silent", Requests: []modbus.Request{{Unit: 2, Quantity: 1}}, Period: 100 * time.Millisecond},
		}
		var values []float64
		var kinds []modbus.ErrorKind
		f := modbus.Field{Type: modbus.Float32}
		l := modbus.NewLine(modbus.LineConfig{Name: "pipe", Timeout: 20 * time.Millisecond}, c, polls, func(r modbus.Result) {
			if r.Poll == 0 {
				v, err := f.Decode(r.Blocks[0], 0)
				if err != nil {
					t.Errorf("decode: %v (result %+v)", err, r)
				}
				values = append(values, v)
				return
			}
			kinds = append(kinds, modbus.Kind(r.Err))
		})
		runFor(t, l, 1010*time.Millisecond)
		if len(values) != 11 {
			t.Errorf("%d good readings in 1 s, want 11", len(values))
		}
		for _, v := range values {
			if v != float64(float32(123.456)) {
				t.Errorf("good reading %v, want 123.456", v)
			}
		}
		// Silent head: 0, 100, 300, 700 ms.
		if !slices.Equal(kinds, []modbus.ErrorKind{modbus.KindTimeout, modbus.KindTimeout, modbus.KindTimeout, modbus.KindTimeout}) {
			t.Errorf("silent head results = %v, want 4 timeouts", kinds)
		}
	})
}

// frameErrors fails the first k reads with a damaged frame.
func frameErrors(k int) behaviour {
	return func(ctx context.Context, n int) ([]uint16, error) {
		if n < k {
			return nil, fmt.Errorf("%w: CRC", modbus.ErrFrame)
		}
		return []uint16{uint16(n)}, nil
	}
}

// takes spends d on each read.
func takes(d time.Duration) behaviour {
	return func(ctx context.Context, n int) ([]uint16, error) {
		select {
		case <-time.After(d):
			return []uint16{uint16(n)}, nil
		case <-ctx.Done():
			return nil, fmt.Errorf("%w: slow", modbus.ErrTimeout)
		}
	}
}

func multi(name string, period time.Duration, addrs ...uint16) modbus.Poll {
	p := modbus.Poll{Name: name, Period: period}
	for _, a := range addrs {
		p.Requests = append(p.Requests, modbus.Request{Unit: 1, Address: a, Quantity: 1})
	}
	return p
}

// A poll's requests are read back to back and delivered together, one block
// per request; a failing request ends the poll, and the requests after it
// are not read.
func TestLinePollReadsBlocksBackToBack(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: ok, 2: takes(3 * time.Millisecond), 3: ok, 4: failFirst(1), 5: ok})
		var got []string
		l := modbus.NewLine(modbus.LineConfig{Name: "l"}, fr,
			[]modbus.Poll{multi("a", 100*time.Millisecond, 1, 2, 3), multi("b", 100*time.Millisecond, 4, 5)},
			func(r modbus.Result) {
				got = append(got, fmt.Sprintf("%d %v %v %v", r.Poll, r.Blocks, modbus.Kind(r.Err), r.Elapsed))
			})
		runFor(t, l, 160*time.Millisecond)
		want := []string{
			"0 [[0] [0] [0]] none 3ms",
			"1 [] connection 0s",
			"0 [[1] [1] [1]] none 3ms",
			"1 [[1] [0]] none 0s",
		}
		if !slices.Equal(got, want) {
			t.Errorf("results = %q, want %q", got, want)
		}
		// The three blocks of poll a are read at once, with no gap but the
		// read of block 2 itself.
		if a1, a2, a3 := fr.times(1), fr.times(2), fr.times(3); !slices.Equal(a1, ms(0, 100)) ||
			!slices.Equal(a2, ms(0, 100)) || !slices.Equal(a3, ms(3, 103)) {
			t.Errorf("poll a read at %v, %v, %v", a1, a2, a3)
		}
		// Poll b falls due with poll a and follows it: its block 4 fails at
		// 3 ms, so block 5 is first read at 103 ms, after poll a's second
		// reading and block 4's first success.
		if a5 := fr.times(5); !slices.Equal(a5, ms(103)) {
			t.Errorf("block 5 read at %v, want only after block 4 first succeeded (103 ms)", a5)
		}
		s := l.Stats()
		if p := s.Polls[0]; p.Polls != 2 || p.Transactions != 6 || p.Failures != 0 {
			t.Errorf("poll a stats = %+v", p)
		}
		if p := s.Polls[1]; p.Polls != 2 || p.Transactions != 3 || p.Failures != 1 || p.Errors[modbus.KindConnection] != 1 {
			t.Errorf("poll b stats = %+v", p)
		}
	})
}

// A damaged frame is retried once at once; both attempts are counted. Two
// in a row fail the poll; other errors are not retried.
func TestLineRetriesFrameErrorOnce(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: frameErrors(1), 2: frameErrors(2), 3: failFirst(1)})
		var kinds [3][]modbus.ErrorKind
		l := modbus.NewLine(modbus.LineConfig{Name: "l"}, fr,
			[]modbus.Poll{poll("once", 1, time.Second), poll("twice", 2, time.Second), poll("other", 3, time.Second)},
			func(r modbus.Result) { kinds[r.Poll] = append(kinds[r.Poll], modbus.Kind(r.Err)) })
		runFor(t, l, 700*time.Millisecond) // each read once, at 0
		if !slices.Equal(kinds[0], []modbus.ErrorKind{modbus.KindNone}) ||
			!slices.Equal(kinds[1], []modbus.ErrorKind{modbus.KindFrame}) ||
			!slices.Equal(kinds[2], []modbus.ErrorKind{modbus.KindConnection}) {
			t.Errorf("results = %v", kinds)
		}
		s := l.Stats()
		for i, want := range []modbus.PollStats{
			{Name: "once", Polls: 1, Transactions: 2, Retries: 1, Errors: errs(modbus.KindFrame, 1)},
			{Name: "twice", Polls: 1, Failures: 1, Transactions: 2, Retries: 1, Errors: errs(modbus.KindFrame, 2), Failing: true},
			{Name: "other", Polls: 1, Failures: 1, Transactions: 1, Errors: errs(modbus.KindConnection, 1), Failing: true},
		} {
			if s.Polls[i] != want {
				t.Errorf("poll %d stats = %+v, want %+v", i, s.Polls[i], want)
			}
		}
		if got := fr.times(1); !slices.Equal(got, ms(0, 0)) {
			t.Errorf("retry at %v, want at once", got)
		}
	})
}

func errs(k modbus.ErrorKind, n uint64) (e [modbus.KindFrame + 1]uint64) {
	e[k] = n
	return e
}

// The line's transaction times land in their buckets, and the busy
// fraction is the time in transactions over the time running.
func TestLineTransactionTimes(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := newFakeReader(map[uint16]behaviour{1: takes(3 * time.Millisecond), 2: takes(30 * time.Millisecond), 3: dead})
		var took []time.Duration
		l := modbus.NewLine(modbus.LineConfig{Name: "l", Timeout: 300 * time.Millisecond, BackoffMax: time.Hour},
			fr, []modbus.Poll{poll("a", 1, 100*time.Millisecond), poll("b", 2, 100*time.Millisecond), poll("c", 3, 600*time.Millisecond)},
			func(r modbus.Result) { took = append(took, r.Elapsed) })
		if s := l.Stats(); s.Running != 0 || s.Busy() != 0 || s.Times.Mean() != 0 {
			t.Errorf("stats before Run = %+v", s)
		}
		runFor(t, l, 995*time.Millisecond)
		s := l.Stats()
		var sum time.Duration
		var n3, n30, n300 uint64
		for _, d := range took {
			sum += d
			switch d {
			case 3 * time.Millisecond:
				n3++
			case 30 * time.Millisecond:
				n30++
			case 300 * time.Millisecond:
				n300++
			default:
				t.Errorf("a poll took %v", d)
			}
		}
		// c times out at 0 (after a and b) and again one backoff (its
		// period) later.
		if n3 < 6 || n30 < 6 || n300 != 2 {
			t.Fatalf("polls took %v", took)
		}
		if s.Times.Count != uint64(len(took)) || s.Times.Sum != sum || s.Times.Mean() != sum/time.Duration(len(took)) {
			t.Errorf("times = %+v, want %d transactions taking %v", s.Times, len(took), sum)
		}
		// Cumulative buckets: ≤ 5 ms holds the 3 ms reads, ≤ 50 ms the 30 ms
		// ones too, ≤ 500 ms the timeout.
		b := s.Times.Buckets
		if b[1] != 0 || b[2] != n3 || b[4] != n3 || b[5] != n3+n30 || b[7] != n3+n30 || b[8] != n3+n30+n300 || b[11] != s.Times.Count {
			t.Errorf("buckets %v for %d, %d, %d reads", b, n3, n30, n300)
		}
		if modbus.TransactionTimeBounds[2] != 5*time.Millisecond || modbus.TransactionTimeBounds[8] != 500*time.Millisecond {
			t.Errorf("bounds %v", modbus.TransactionTimeBounds)
		}
		if s.Running != 995*time.Millisecond {
			t.Errorf("running %v, want 995ms", s.Running)
		}
		if got, want := s.Busy(), float64(sum)/float64(995*time.Millisecond); got != want {
			t.Errorf("busy %v, want %v", got, want)
		}
	})
}
