package daemon

import (
	"fmt"
	"math/rand/v2"
	"strings"
	"time"
)

// soakLine is the RS-485 line of TestSoak: the last soakLineHeads heads,
// served by the simulator's RTU server on a pseudo-terminal, with faults
// scripted in scenario time (from the simulator's start). A pseudo-terminal
// moves bytes at once, but the simulator paces its answers as a 230400 baud
// wire would and the client keeps t3.5 (1.75 ms) between frames: a poll
// of one block of 4 registers costs some 5 ms, so the 8 heads at 10 Hz
// keep the line about 40 % busy, and a silent head adds one timeout
// (100 ms) per backoff step (at most 400 ms apart).
type soakLine struct {
	device string
	faults []soakLineFault
}

// soakLineFault is one scripted misbehaviour of a head on the line. The
// line carries one at a time, so that a silent head's timeouts never
// hold up another failing head.
type soakLineFault struct {
	head  string
	kind  string // "silent" or "crc"
	every int    // crc: every n-th request is hit; 1 fails every poll, 2 and 3 are repaired by the line's one retry
	at    time.Duration
	dur   time.Duration
}

// failing reports whether the fault fails the head's polls (rather than
// being repaired by the line's retry of a damaged frame).
func (f soakLineFault) failing() bool { return f.kind == "silent" || f.every <= 1 }

func (f soakLineFault) String() string {
	if f.kind == "crc" {
		return fmt.Sprintf("CRC error on every %d. answer", f.every)
	}
	return "silent"
}

// Names and unit ids: heads h01..h56 hang on the TCP endpoint as units 1 to
// 56, heads h57..h64 on the line as units 1 to 8.
const (
	soakHeads     = 64
	soakLineHeads = 8
	soakTCPHeads  = soakHeads - soakLineHeads
)

func soakHeadName(i int) string { return fmt.Sprintf("h%02d", i) }

// newSoakLine scripts the line's faults for a soak of length: from 1.5 s
// on, one fault after another on a head drawn at random, each followed by
// a pause, the last ending a second before the soak does. Half the faults
// fail the head long enough (1.6 to 2.4 s) for its bad_quality alarm to
// activate, the first always (so that a short run sees one too); short
// silences and repaired CRC errors fill the rest.
func newSoakLine(rng *rand.Rand, length time.Duration, device string) *soakLine {
	l := &soakLine{device: device}
	ms := func(lo, hi int) time.Duration { return time.Duration(lo+rng.IntN(hi-lo+1)) * time.Millisecond }
	at := 1500 * time.Millisecond
	for {
		f := soakLineFault{head: soakHeadName(soakTCPHeads + 1 + rng.IntN(soakLineHeads)), at: at}
		kind := rng.IntN(4)
		if len(l.faults) == 0 {
			kind = 0
		}
		switch kind {
		case 0:
			f.kind, f.dur = "silent", ms(1600, 2400)
		case 1:
			f.kind, f.every, f.dur = "crc", 1, ms(1600, 2400)
		case 2:
			f.kind, f.dur = "silent", ms(200, 400)
		case 3:
			f.kind, f.every, f.dur = "crc", 2+rng.IntN(2), ms(1000, 2000)
		}
		if f.at+f.dur > length-time.Second {
			return l
		}
		l.faults = append(l.faults, f)
		at = f.at + f.dur + ms(300, 1200)
	}
}

// config is the line's entry under lines:.
func (l *soakLine) config() string {
	return fmt.Sprintf("[{name: rs485, device: %s, baud: 230400, parity: none, stop_bits: 2, timeout: 100ms, backoff_max: 400ms}]", l.device)
}

// sim is the sim section of a head on the line: a 1400 K blackbody, as
// the heads on the endpoint, and the head's scripted faults.
func (l *soakLine) sim(head string) string {
	var b strings.Builder
	b.WriteString("    sim:\n      temperature: {start: 1400K}\n")
	first := true
	for _, f := range l.faults {
		if f.head != head {
			continue
		}
		if first {
			b.WriteString("      faults:\n")
			first = false
		}
		every := ""
		if f.every > 1 {
			every = fmt.Sprintf(", every: %d", f.every)
		}
		fmt.Fprintf(&b, "        - {kind: %s%s, at: %dms, for: %dms}\n", f.kind, every, f.at.Milliseconds(), f.dur.Milliseconds())
	}
	return b.String()
}
