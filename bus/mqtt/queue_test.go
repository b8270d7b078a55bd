package mqtt

import (
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"
	"time"
)

// The ring queue behaves like a plain slice model under random operations,
// across growth and wrap-around.
func TestQueueAgainstModel(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	const limit = 37
	q := newQueue(limit)
	var model []Message
	sent := 0
	id := 0
	for step := 0; step < 200000; step++ {
		switch op := rng.IntN(10); {
		case op < 4: // push, dropping as Publish does when full
			m := Message{Topic: strconv.Itoa(id), Retain: rng.IntN(4) == 0}
			id++
			if q.full() {
				i := slices.IndexFunc(model[sent:], func(m Message) bool { return !m.Retain })
				got := q.dropOldestUnsent()
				if got != (i >= 0) {
					t.Fatalf("step %d: dropOldestUnsent = %v, model says %v", step, got, i >= 0)
				}
				if i < 0 {
					continue
				}
				model = slices.Delete(model, sent+i, sent+i+1)
			}
			q.push(m)
			model = append(model, m)
		case op < 7: // send
			m, ok := q.nextUnsent()
			if ok != (sent < len(model)) {
				t.Fatalf("step %d: nextUnsent ok = %v with %d sent of %d", step, ok, sent, len(model))
			}
			if ok {
				if !same(m, model[sent]) {
					t.Fatalf("step %d: nextUnsent = %v, want %v", step, m, model[sent])
				}
				sent++
			}
		case op < 9: // acknowledge
			if sent > 0 {
				if m := q.popFront(); !same(m, model[0]) {
					t.Fatalf("step %d: popFront = %v, want %v", step, m, model[0])
				}
				model = model[1:]
				sent--
			}
		default: // connection lost
			q.unsendAll()
			sent = 0
		}
		if q.len() != len(model) || q.sent != sent {
			t.Fatalf("step %d: len %d sent %d, model %d %d", step, q.len(), q.sent, len(model), sent)
		}
		for i := range model {
			if !same(*q.at(i), model[i]) {
				t.Fatalf("step %d: entry %d = %v, want %v", step, i, *q.at(i), model[i])
			}
		}
	}
}

func TestBackoff(t *testing.T) {
	b := backoff{min: 100 * time.Millisecond, max: time.Second}
	caps := []time.Duration{100, 200, 400, 800, 1000, 1000}
	for i, c := range caps {
		c *= time.Millisecond
		d := b.next()
		if d < c/2 || d > c {
			t.Errorf("wait %d = %v, want within [%v, %v]", i, d, c/2, c)
		}
	}
	b.reset()
	if d := b.next(); d > 100*time.Millisecond {
		t.Errorf("after reset: %v, want at most 100ms", d)
	}
	// Jitter: waits at the cap spread over [max/2, max], so that gateways
	// cut off together do not come back in step. 200 uniform draws all
	// within half that range have a probability of 2^-199.
	lo, hi := time.Hour, time.Duration(0)
	for range 200 {
		d := b.next()
		lo, hi = min(lo, d), max(hi, d)
	}
	if hi-lo < 250*time.Millisecond {
		t.Errorf("waits at the cap from %v to %v: no jitter", lo, hi)
	}
}

func TestLimiter(t *testing.T) {
	l := limiter{period: 10 * time.Second}
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	for i, c := range []struct {
		at       time.Duration
		log      bool
		heldBack int
	}{
		{0, true, 0},
		{time.Second, false, 0},
		{5 * time.Second, false, 0},
		{10 * time.Second, true, 2},
		{11 * time.Second, false, 0},
		{30 * time.Second, true, 1},
	} {
		ok, held := l.allow(t0.Add(c.at))
		if ok != c.log || held != c.heldBack {
			t.Errorf("event %d: allow = %v, %d; want %v, %d", i, ok, held, c.log, c.heldBack)
		}
	}
	if n := l.reset(); n != 6 {
		t.Errorf("reset counted %d, want 6", n)
	}
}

func same(a, b Message) bool {
	return a.Topic == b.Topic && a.Retain == b.Retain && string(a.Payload) == string(b.Payload)
}
