//go:build linux

package sim

import (
	"context"
	"fmt"
	"sync"
	"testing"
	"time"

	"glowgate/bus/modbus"
)

// benchRegisters is the size of each benchmark head's register block: two
// float32 channels (0..3), a status word (4), an int16 head temperature (5)
// and two float32 extras (6..9).
const benchRegisters = 10

// benchHead is a two-colour head with a status word and extras filling
// registers 0..9 of the input table.
func benchHead(t testing.TB, unit uint8) Head {
	h := twoColour(t, unit, 1500+10*float64(unit))
	h.Name = fmt.Sprintf("head-%d", unit)
	h.Status = &StatusWord{Field: modbus.Field{Address: 4, Type: modbus.Uint16},
		Bits: []BitEpisode{{Bit: 2, At: time.Second, For: time.Second, Period: 3 * time.Second}}}
	h.Extras = []Extra{
		{Name: "head temperature", Field: modbus.Field{Address: 5, Type: modbus.Int16, Scale: 0.1}, Value: Constant(308.15)},
		{Name: "emissivity setting", Field: modbus.Field{Address: 6, Type: modbus.Float32}, Value: Constant(0.85)},
		{Name: "exposure", Field: modbus.Field{Address: 8, Type: modbus.Float32}, Value: Constant(0.002)},
	}
	return h
}

// wireTime is the time one read of n registers occupies an RTU line:
//
//	(13 + 2n)·11/baud + 2·t3.5
//
// an 8-byte request, a (5 + 2n)-byte answer, and a t3.5 silence after each
// (LIBRARIES.md, "Modbus spec"; Modbus over Serial Line V1.02, 2.5.1.1).
func wireTime(baud, n int) time.Duration {
	return time.Duration(13+2*n)*CharTime(baud) + 2*T35(baud)
}

// pollEvent is what a benchmark line's deliver function passes on.
type pollEvent struct {
	poll int
	err  error
}

// benchLine is a simulated RTU line polled back to back by a modbus.Line
// with the RTU client.
type benchLine struct {
	events chan pollEvent
	stop   func()
}

// startBenchLine serves heads on a simulated line at baud and polls each of
// them (one request of benchRegisters input registers) back to back.
func startBenchLine(b *testing.B, baud int, heads []Head, cfg modbus.LineConfig) *benchLine {
	b.Helper()
	srv, err := NewRTUServer(RTUConfig{Baud: baud}, heads, nil)
	if err != nil {
		b.Fatal(err)
	}
	if err := srv.Start(b.Context()); err != nil {
		b.Fatal(err)
	}
	client := modbus.NewRTUClient(modbus.SerialConfig{
		Device: srv.Path(), Baud: baud, Parity: "none", StopBits: 1, Timeout: cfg.Timeout,
	})
	polls := make([]modbus.Poll, len(heads))
	for i, h := range heads {
		polls[i] = modbus.Poll{
			Name:     h.Name,
			Requests: []modbus.Request{{Unit: h.Unit, Table: modbus.InputRegisters, Address: 0, Quantity: benchRegisters}},
			Period:   time.Nanosecond, // back to back: next due at the end of the poll
		}
	}
	bl := &benchLine{events: make(chan pollEvent, 1<<16)}
	line := modbus.NewLine(cfg, client, polls, func(r modbus.Result) {
		select {
		case bl.events <- pollEvent{r.Poll, r.Err}:
		default:
		}
	})
	ctx, cancel := context.WithCancel(b.Context())
	var wg sync.WaitGroup
	wg.Go(func() { line.Run(ctx) })
	bl.stop = func() {
		cancel()
		wg.Wait()
		srv.Close()
	}
	b.Cleanup(bl.stop)
	return bl
}

// next returns the next delivered poll, failing the benchmark after 10 s
// without one.
func (bl *benchLine) next(b *testing.B) pollEvent {
	select {
	case ev := <-bl.events:
		return ev
	case <-time.After(10 * time.Second):
		b.Fatal("no poll delivered for 10 s")
		return pollEvent{}
	}
}

// rate polls the line until d has passed and returns the successful polls
// per second of the heads keep selects.
func (bl *benchLine) rate(b *testing.B, d time.Duration, keep func(int) bool) float64 {
	start := time.Now()
	n := 0
	for time.Since(start) < d {
		if ev := bl.next(b); ev.err == nil && keep(ev.poll) {
			n++
		}
	}
	return float64(n) / time.Since(start).Seconds()
}

func benchHeads(b *testing.B) []Head {
	heads := make([]Head, 8)
	for i := range heads {
		heads[i] = benchHead(b, uint8(i+1))
	}
	return heads
}

// BenchmarkRTULine polls eight heads of 10 registers each back to back on
// one simulated RTU line, with the bus/modbus Line and RTU client over the
// pseudo-terminal, and compares the polls per second with the wire limit
// 1/wireTime (LIBRARIES.md: 43.6/s at 19200 baud, 150/s at 115200 baud for
// 10 registers). One op is one poll.
func BenchmarkRTULine(b *testing.B) {
	for _, baud := range []int{19200, 115200} {
		b.Run(fmt.Sprintf("baud=%d", baud), func(b *testing.B) {
			bl := startBenchLine(b, baud, benchHeads(b), modbus.LineConfig{
				Name: "bench", Timeout: 100 * time.Millisecond, BackoffMax: 5 * time.Second,
			})
			for range 8 { // the device is open and every head answered once
				if ev := bl.next(b); ev.err != nil {
					b.Fatalf("poll %d: %v", ev.poll, ev.err)
				}
			}
			n := 0
			start := time.Now()
			for b.Loop() {
				if ev := bl.next(b); ev.err != nil {
					b.Fatalf("poll %d: %v", ev.poll, ev.err)
				}
				n++
			}
			rate := float64(n) / time.Since(start).Seconds()
			limit := 1 / wireTime(baud, benchRegisters).Seconds()
			b.ReportMetric(rate, "polls/s")
			b.ReportMetric(limit, "limit/s")
			b.ReportMetric(rate/limit, "ratio")
		})
	}
}

// BenchmarkRTUSimulator isolates the simulator from the client: a raw
// client (the tests' rtuPeer) reads one head's 10 registers back to back,
// keeping t3.5 after each answer with sleepFine, and the polls per second
// are compared with the wire limit as in BenchmarkRTULine. One op is one
// read.
func BenchmarkRTUSimulator(b *testing.B) {
	for _, baud := range []int{19200, 115200} {
		b.Run(fmt.Sprintf("baud=%d", baud), func(b *testing.B) {
			srv, err := NewRTUServer(RTUConfig{Baud: baud}, []Head{benchHead(b, 1)}, nil)
			if err != nil {
				b.Fatal(err)
			}
			if err := srv.Start(b.Context()); err != nil {
				b.Fatal(err)
			}
			defer srv.Close()
			p := openPeer(b, srv.Path())
			req := readRequest(1, 0x04, 0, benchRegisters)
			n := 0
			start := time.Now()
			for b.Loop() {
				p.write(req)
				p.registers(1, 0x04, benchRegisters)
				sleepFine(T35(baud))
				n++
			}
			rate := float64(n) / time.Since(start).Seconds()
			limit := 1 / wireTime(baud, benchRegisters).Seconds()
			b.ReportMetric(rate, "polls/s")
			b.ReportMetric(limit, "limit/s")
			b.ReportMetric(rate/limit, "ratio")
		})
	}
}

// BenchmarkRTULineDeadHead is BenchmarkRTULine with one of the eight heads
// silent: the Line's capped backoff (Timeout 100 ms, BackoffMin = BackoffMax
// = 5 s) lets the dead head cost one timeout, and the client's settling
// after it, per 5 s. One op is one backoff cycle of the dead head, from one
// of its failed polls to the next, so the figures are those of the steady
// state. Reported: the seven healthy heads' successful polls per second, the
// all-healthy rate of the same eight heads measured first on the same kind
// of line, and the loss 1 − polls/healthy (target ≤ 5 %).
func BenchmarkRTULineDeadHead(b *testing.B) {
	for _, baud := range []int{19200, 115200} {
		b.Run(fmt.Sprintf("baud=%d", baud), func(b *testing.B) {
			cfg := modbus.LineConfig{
				Name: "bench", Timeout: 100 * time.Millisecond,
				BackoffMin: 5 * time.Second, BackoffMax: 5 * time.Second,
			}
			all := func(int) bool { return true }
			healthyLine := startBenchLine(b, baud, benchHeads(b), cfg)
			healthyLine.rate(b, 200*time.Millisecond, all) // open the device, settle
			healthy := healthyLine.rate(b, 2*time.Second, all)
			healthyLine.stop()

			const dead = 3
			heads := benchHeads(b)
			heads[dead].Faults = []Fault{{Kind: Silent}}
			bl := startBenchLine(b, baud, heads, cfg)
			for ev := bl.next(b); ev.poll != dead || ev.err == nil; ev = bl.next(b) {
			}
			n := 0
			start := time.Now()
			for b.Loop() {
				for {
					ev := bl.next(b)
					if ev.poll == dead {
						if ev.err == nil {
							b.Fatal("the silent head answered")
						}
						break
					}
					if ev.err != nil {
						b.Fatalf("healthy poll %d: %v", ev.poll, ev.err)
					}
					n++
				}
			}
			rate := float64(n) / time.Since(start).Seconds()
			b.ReportMetric(rate, "polls/s")
			b.ReportMetric(healthy, "healthy/s")
			b.ReportMetric(1-rate/healthy, "loss")
		})
	}
}

// BenchmarkTCPSimulator reads one head's 10 registers over loopback TCP with
// the bus/modbus TCP client, back to back. One op is one read.
func BenchmarkTCPSimulator(b *testing.B) {
	_, addr := startServer(b, []Head{benchHead(b, 1)}, newTestClock(), nil)
	c := modbus.NewTCPClient(addr, time.Second)
	defer c.Close()
	req := modbus.Request{Unit: 1, Table: modbus.InputRegisters, Address: 0, Quantity: benchRegisters}
	ctx := b.Context()
	if _, err := c.Read(ctx, req); err != nil {
		b.Fatal(err)
	}
	n := 0
	start := time.Now()
	for b.Loop() {
		if _, err := c.Read(ctx, req); err != nil {
			b.Fatal(err)
		}
		n++
	}
	b.ReportMetric(float64(n)/time.Since(start).Seconds(), "polls/s")
}
