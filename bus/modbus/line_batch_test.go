package modbus_test

import (
	"cmp"
	"context"
	"fmt"
	"slices"
	"sync"
	"testing"
	"testing/synctest"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
)

// batchFake is a fakeReader that can batch: each request of a batch runs
// its behaviour concurrently, and the results are handed out as they
// finish. It records the addresses of each batch.
type batchFake struct {
	*fakeReader
	mu      sync.Mutex
	batches [][]uint16
}

func (f *batchFake) ReadBatch(ctx context.Context, reqs []modbus.Request, got func(int, []uint16, error)) {
	type out struct {
		i    int
		regs []uint16
		err  error
	}
	addrs := make([]uint16, len(reqs))
	for i, r := range reqs {
		addrs[i] = r.Address
	}
	f.mu.Lock()
	f.batches = append(f.batches, addrs)
	f.mu.Unlock()
	ch := make(chan out, len(reqs))
	for i, r := range reqs {
		go func() {
			regs, err := f.Read(ctx, r)
			ch <- out{i, regs, err}
		}()
	}
	for range reqs {
		o := <-ch
		got(o.i, o.regs, o.err)
	}
}

func (f *batchFake) batchList() string {
	f.mu.Lock()
	defer f.mu.Unlock()
	return fmt.Sprint(f.batches)
}

// Polls that fall due together go out in batches of up to InFlight
// requests, a poll's requests kept in order; each period again.
func TestLineBatchesPollsDueTogether(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := &batchFake{fakeReader: newFakeReader(map[uint16]behaviour{1: ok, 2: ok, 3: ok, 4: ok, 5: ok, 6: ok})}
		var got []string
		polls := []modbus.Poll{
			poll("a", 1, 100*time.Millisecond), multi("b", 100*time.Millisecond, 2, 3),
			poll("c", 4, 100*time.Millisecond), poll("d", 5, 200*time.Millisecond), poll("e", 6, 100*time.Millisecond),
		}
		l := modbus.NewLine(modbus.LineConfig{Name: "l", InFlight: 4}, fr, polls, func(r modbus.Result) {
			got = append(got, fmt.Sprintf("%d %v", r.Poll, r.Blocks))
		})
		runFor(t, l, 150*time.Millisecond)
		if want := "[[1 2 3 4] [5 6] [1 2 3 4] [6]]"; fr.batchList() != want {
			t.Errorf("batches = %s, want %s", fr.batchList(), want)
		}
		// Within a batch, in the order the answers came.
		want := []string{"0 [[0]]", "0 [[1]]", "1 [[0] [0]]", "1 [[1] [1]]", "2 [[0]]", "2 [[1]]", "3 [[0]]", "4 [[0]]", "4 [[1]]"}
		if slices.Sort(got); !slices.Equal(got, want) {
			t.Errorf("results = %q, want %q", got, want)
		}
		if a := fr.times(1); !slices.Equal(a, ms(0, 100)) {
			t.Errorf("poll a read at %v", a)
		}
		s := l.Stats()
		if p := s.Polls[1]; p.Polls != 2 || p.Transactions != 4 {
			t.Errorf("poll b stats = %+v", p)
		}
	})
}

// A poll is delivered when its own answers are in: a silent head in the
// same batch delays the next batch, not the others' readings. The first
// failure in request order fails a poll. The fake reader has no timeout
// of its own, so its silent requests end with the batch's bound: five
// requests × 50 ms.
func TestLineBatchDeliversEachPollWhenAnswered(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := &batchFake{fakeReader: newFakeReader(map[uint16]behaviour{
			1: dead, 2: takes(2 * time.Millisecond), 3: failFirst(5), 4: dead, 5: ok,
		})}
		type delivered struct {
			at   time.Duration
			poll int
			kind modbus.ErrorKind
		}
		var got []delivered
		t0 := time.Now()
		polls := []modbus.Poll{
			poll("silent", 1, time.Second), poll("good", 2, time.Second), multi("failing", time.Second, 3, 4, 5),
		}
		l := modbus.NewLine(modbus.LineConfig{Name: "l", InFlight: 8, Timeout: 50 * time.Millisecond}, fr, polls, func(r modbus.Result) {
			got = append(got, delivered{time.Since(t0), r.Poll, modbus.Kind(r.Err)})
		})
		runFor(t, l, 500*time.Millisecond)
		want := []delivered{
			{2 * time.Millisecond, 1, modbus.KindNone},
			{250 * time.Millisecond, 0, modbus.KindTimeout},
			// Its request 3 failed at once, 4 timed out: the first in
			// order is the poll's error.
			{250 * time.Millisecond, 2, modbus.KindConnection},
		}
		// The two timeouts end together, in either order.
		slices.SortStableFunc(got, func(a, b delivered) int { return cmp.Or(cmp.Compare(a.at, b.at), cmp.Compare(a.poll, b.poll)) })
		if !slices.Equal(got, want) {
			t.Errorf("delivered %v, want %v", got, want)
		}
	})
}

// A damaged frame in a batch is read again once, on its own, after the
// batch; both attempts are counted.
func TestLineBatchRetriesFrameErrorOnce(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := &batchFake{fakeReader: newFakeReader(map[uint16]behaviour{1: frameErrors(1), 2: frameErrors(2), 3: ok})}
		var kinds []string
		l := modbus.NewLine(modbus.LineConfig{Name: "l", InFlight: 3}, fr,
			[]modbus.Poll{poll("once", 1, time.Second), poll("twice", 2, time.Second), poll("fine", 3, time.Second)},
			func(r modbus.Result) { kinds = append(kinds, fmt.Sprintf("%d %v", r.Poll, modbus.Kind(r.Err))) })
		runFor(t, l, 500*time.Millisecond)
		// The batch's answer first; then the two retries, in the order their
		// damaged answers came, which is either.
		if len(kinds) == 3 {
			slices.Sort(kinds[1:])
		}
		if want := []string{"2 none", "0 none", "1 frame"}; !slices.Equal(kinds, want) {
			t.Errorf("results = %q, want %q", kinds, want)
		}
		s := l.Stats()
		if p := s.Polls[0]; p.Transactions != 2 || p.Retries != 1 || p.Failures != 0 {
			t.Errorf("poll once stats = %+v", p)
		}
		if p := s.Polls[1]; p.Transactions != 2 || p.Retries != 1 || p.Failures != 1 || p.Errors[modbus.KindFrame] != 2 {
			t.Errorf("poll twice stats = %+v", p)
		}
		if b := fr.batchList(); b != "[[1 2 3]]" {
			t.Errorf("batches = %s, want the retries read on their own", b)
		}
	})
}

// More than one request in flight needs a reader that can batch.
func TestLineInFlightNeedsBatchReader(t *testing.T) {
	fr := newFakeReader(map[uint16]behaviour{1: ok})
	l := modbus.NewLine(modbus.LineConfig{Name: "l", InFlight: 2}, fr, []modbus.Poll{poll("a", 1, time.Second)}, nil)
	if err := l.Run(t.Context()); err == nil {
		t.Fatal("Run accepted InFlight 2 with a reader that cannot batch")
	}
}

// The TCP client batching over loopback: twenty units behind one
// endpoint, eight in flight, every reading right and one connection; the
// busy fraction counts each batch once, not once per request.
func TestLineBatchesWithClient(t *testing.T) {
	srv := modbustest.NewServer(t)
	const units = 20
	polls := make([]modbus.Poll, units)
	for u := range units {
		srv.Set(uint8(u+1), modbus.InputRegisters, 0, uint16(u), 0xBEEF)
		polls[u] = modbus.Poll{Name: fmt.Sprint(u + 1), Period: 20 * time.Millisecond,
			Requests: []modbus.Request{{Unit: uint8(u + 1), Table: modbus.InputRegisters, Quantity: 2}}}
	}
	c := modbus.NewTCPClient(srv.Addr(), time.Second)
	var mu sync.Mutex
	count := make([]int, units)
	var bad []string
	l := modbus.NewLine(modbus.LineConfig{Name: "tcp", InFlight: 8}, c, polls, func(r modbus.Result) {
		mu.Lock()
		defer mu.Unlock()
		if r.Err != nil || r.Blocks[0][0] != uint16(r.Poll) || r.Blocks[0][1] != 0xBEEF {
			bad = append(bad, fmt.Sprintf("poll %d: %v %v", r.Poll, r.Blocks, r.Err))
		}
		count[r.Poll]++
	})
	ctx, cancel := context.WithCancel(t.Context())
	done := make(chan error)
	go func() { done <- l.Run(ctx) }()
	for {
		mu.Lock()
		least := slices.Min(count)
		mu.Unlock()
		if least >= 10 {
			break
		}
		select {
		case err := <-done:
			t.Fatalf("Run returned %v", err)
		case <-time.After(5 * time.Millisecond):
		}
	}
	cancel()
	<-done
	if len(bad) > 0 {
		t.Errorf("bad results: %q", bad[:min(len(bad), 5)])
	}
	if n := srv.Connections(); n != 1 {
		t.Errorf("connections = %d, want 1", n)
	}
	s := l.Stats()
	if s.BusyTime <= 0 || s.BusyTime >= s.Times.Sum || s.Busy() > 1 {
		t.Errorf("busy time %v of %v running, transactions summing to %v", s.BusyTime, s.Running, s.Times.Sum)
	}
}

// In a batch a poll is stamped with the arrival of the answer before its
// own (the batch's send time for the first answer): a server that
// answers in turn, like a gateway to a serial line, reads each request
// only after answering the one before.
func TestLineBatchStampsAfterTheAnswerBefore(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		fr := &batchFake{fakeReader: newFakeReader(map[uint16]behaviour{
			1: takes(20 * time.Millisecond), 2: takes(40 * time.Millisecond), 3: takes(60 * time.Millisecond),
		})}
		t0 := time.Now()
		stamps := map[int]time.Duration{}
		l := modbus.NewLine(modbus.LineConfig{Name: "l", InFlight: 3}, fr,
			[]modbus.Poll{poll("third", 3, time.Second), poll("first", 1, time.Second), poll("second", 2, time.Second)},
			func(r modbus.Result) { stamps[r.Poll] = r.Time.Sub(t0) })
		runFor(t, l, 500*time.Millisecond)
		if want := map[int]time.Duration{1: 0, 2: 20 * time.Millisecond, 0: 40 * time.Millisecond}; fmt.Sprint(stamps) != fmt.Sprint(want) {
			t.Errorf("stamps %v, want %v", stamps, want)
		}
	})
}
