package modbus_test

import (
	"context"
	"log/slog"
	"slices"
	"testing"
	"time"

	"glowgate/bus/modbus"
)

// runLine runs l until the test ends or stop is called, and delivers its
// results to the returned channel (buffered: the line must not block).
func runLine(t *testing.T, l *modbus.Line) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(t.Context())
	done := make(chan struct{})
	go func() {
		defer close(done)
		l.Run(ctx)
	}()
	stop = func() {
		cancel()
		<-done
	}
	t.Cleanup(stop)
	return stop
}

// A CRC error on a real serial line is retried at once, and the poll of two
// blocks succeeds; both transactions are counted.
func TestLineRTURetriesDamagedFrame(t *testing.T) {
	p, dev := ptyDevice(t)
	c := rtuClient(t, p.B, time.Second, nil)
	dev.do(answer, badCRC) // the second block's first answer is damaged
	results := make(chan modbus.Result, 16)
	l := modbus.NewLine(modbus.LineConfig{Name: "rtu"}, c, []modbus.Poll{{
		Name:     "head",
		Requests: []modbus.Request{holding(5, 0, 4), holding(5, 10, 2)},
		Period:   time.Hour,
	}}, func(r modbus.Result) {
		r.Blocks = slices.Clone(r.Blocks) // valid only during deliver
		for i := range r.Blocks {
			r.Blocks[i] = slices.Clone(r.Blocks[i])
		}
		results <- r
	})
	stop := runLine(t, l)
	r := <-results
	stop()
	if r.Err != nil || !slices.Equal(r.Blocks[0], want0x1000(0, 4)) || !slices.Equal(r.Blocks[1], want0x1000(10, 2)) {
		t.Fatalf("result = %+v", r)
	}
	s := l.Stats().Polls[0]
	if s.Transactions != 3 || s.Retries != 1 || s.Errors[modbus.KindFrame] != 1 || s.Failures != 0 {
		t.Errorf("stats = %+v, want 3 transactions, 1 retry after 1 frame error, no failure", s)
	}
	if got := len(dev.received()); got != 3 {
		t.Errorf("device received %d requests, want 3", got)
	}
}

// A serial device that vanishes fails the polls with connection errors at
// the pace of the line's backoff (the client tries to reopen it on each),
// and when it comes back the line recovers. The client logs the loss and
// the return once each.
func TestLineRTUDeviceVanishes(t *testing.T) {
	p, dev := ptyDevice(t)
	rec := &recorder{}
	c := rtuClient(t, p.B, 200*time.Millisecond, slog.New(rec))
	results := make(chan modbus.Result, 1000)
	const period, backoffMax = 20 * time.Millisecond, 80 * time.Millisecond
	l := modbus.NewLine(modbus.LineConfig{Name: "rtu", BackoffMax: backoffMax}, c,
		[]modbus.Poll{{Name: "head", Requests: []modbus.Request{holding(1, 0, 2)}, Period: period}},
		func(r modbus.Result) {
			r.Blocks = nil
			results <- r
		})
	runLine(t, l)
	if r := <-results; r.Err != nil {
		t.Fatalf("first poll: %v", r.Err)
	}
	dev.stop()
	p.Stop()
	// Skip polls already under way; then five failures, spaced by the
	// backoff: 20, 40, 80, 80 ms. Each is due that long after the one
	// before was due, so the times from the second add up to at least the
	// sum, less the lateness of the second (a few ms at most). The first
	// failure is not a reference: on a loaded machine it can come late,
	// behind the poll that was under way when the device went.
	var fails []time.Time
	for len(fails) < 5 {
		r := <-results
		if r.Err == nil {
			continue
		}
		if modbus.Kind(r.Err) != modbus.KindConnection {
			t.Fatalf("poll with the device gone: %v, want a connection error", r.Err)
		}
		fails = append(fails, r.Time)
	}
	var sum time.Duration
	for i, backoff := range []time.Duration{2 * period, backoffMax, backoffMax} {
		sum += backoff
		if since := fails[i+2].Sub(fails[1]); since < sum-5*time.Millisecond {
			t.Errorf("failure %d came %v after the second, want at least %v (backoff)", i+2, since, sum)
		}
	}
	p.Start()
	startDevice(t, p.A)
	for {
		r := <-results
		if r.Err == nil {
			break
		}
	}
	want := []string{"serial device opened", "serial device lost", "serial device reopened"}
	if got := rec.messages(); !slices.Equal(got, want) {
		t.Errorf("client logs = %q, want %q", got, want)
	}
}
