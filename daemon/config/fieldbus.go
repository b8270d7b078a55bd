package config

import (
	"fmt"
	"slices"
	"strconv"
	"time"
)

// Defaults of an RS-485 line.
const (
	defaultBaud        = 19200
	defaultParity      = "even" // Modbus over serial line V1.02, 2.5.1: even parity is the default
	defaultStopBits    = 1
	defaultLineTimeout = 200 * time.Millisecond
)

// Line is one RS-485 line (Modbus RTU) with the heads hanging on it.
type Line struct {
	Name       string
	Device     string // serial device, e.g. /dev/ttyUSB0 (or the link the simulator makes)
	Baud       int
	Parity     string // "none", "even" or "odd"
	StopBits   int    // 1 or 2
	Timeout    time.Duration
	BackoffMax time.Duration
}

// Status is a head's status word: which bit raises which flag.
type Status struct {
	Address uint16
	Table   string         // "input" or "holding"; the head's by default
	Bits    map[int]string // bit 0..15 -> one of StatusFlags
}

// StatusFlags are the flags a status-word bit may raise.
var StatusFlags = []string{"detector_saturated", "aiming_light", "head_too_warm", "window_dirty", "head_fault"}

// Extra is an optional value a head reports beside its channel signals:
// its internal temperature for an ambient warning, or a setting read back
// to check it against the gateway's.
type Extra struct {
	Name      string
	Kind      string // "head_temperature", "setting" or "value"
	Table     string // "input" or "holding"; the head's by default
	Signal    Signal
	WarnAbove float64 // head_temperature: K above which head_too_warm is raised (0: none)
	Expect    float64 // setting: the value it must read
	Tolerance float64 // setting: allowed |value − Expect|
}

// Fault is a simulated head's misbehaviour, for `glowgate sim` and tests.
type Fault struct {
	Kind   string        // "silent", "late", "crc", "exception" or "truncated"
	Code   byte          // exception code
	Delay  time.Duration // late
	At     time.Duration // start of the window from the scenario's start
	For    time.Duration // length of the window (0: to the end)
	Period time.Duration // the window repeats every Period (0: once)
	Every  int           // within the window, every n-th request (0 or 1: all)
}

// BitEpisode sets a simulated status flag for a window of time.
type BitEpisode struct {
	Flag    string
	At, For time.Duration
	Period  time.Duration
}

// line decodes one RS-485 line.
func (d *decoder) serialLine(v val) Line {
	l := Line{Baud: defaultBaud, Parity: defaultParity, StopBits: defaultStopBits, Timeout: defaultLineTimeout, BackoffMax: defaultBackoffMax}
	if v.n == nil {
		d.errorf(v, "empty entry (want a mapping with name and device)")
		return l
	}
	f := d.fields(v, "name", "device", "baud", "parity", "stop_bits", "timeout", "backoff_max")
	if v := f.required("name"); v.n != nil {
		if s, ok := d.str(v); ok {
			if s == "" {
				d.errorf(v, "must not be empty")
			} else {
				l.Name = s
			}
		}
	}
	if v := f.required("device"); v.n != nil {
		if s, ok := d.str(v); ok {
			if s == "" {
				d.errorf(v, "must not be empty")
			} else {
				l.Device = s
			}
		}
	}
	if v := f.get("baud"); v.n != nil {
		// The rates of Modbus over serial line V1.02 (2.5.1: 9600 and
		// 19200 required) and the common others.
		if x, ok := d.integer(v, 1, 1000000); ok {
			if !slices.Contains([]int64{1200, 2400, 4800, 9600, 19200, 38400, 57600, 115200, 230400}, x) {
				d.errorf(v, "%d is not a standard rate (want 1200, 2400, 4800, 9600, 19200, 38400, 57600, 115200 or 230400)", x)
			} else {
				l.Baud = int(x)
			}
		}
	}
	if v := f.get("parity"); v.n != nil {
		if s, ok := d.choice(v, "parity", "none", "even", "odd"); ok {
			l.Parity = s
		}
	}
	if v := f.get("stop_bits"); v.n != nil {
		if x, ok := d.integer(v, 1, 2); ok {
			l.StopBits = int(x)
		}
	}
	if v := f.get("timeout"); v.n != nil {
		if x, ok := d.positiveDuration(v); ok {
			l.Timeout = x
		}
	}
	if v := f.get("backoff_max"); v.n != nil {
		if x, ok := d.positiveDuration(v); ok {
			l.BackoffMax = x
		}
	}
	if l.BackoffMax < l.Timeout && !d.failed[v.path] {
		d.errorf(f.get("backoff_max"), "%s is shorter than timeout %s", l.BackoffMax, l.Timeout)
	}
	return l
}

// status decodes a head's status word.
func (d *decoder) status(v val) *Status {
	st := &Status{Bits: map[int]string{}}
	f := d.fields(v, "address", "registers", "bits")
	if v := f.required("address"); v.n != nil {
		if x, ok := d.integer(v, 0, 65535); ok {
			st.Address = uint16(x)
		}
	}
	if v := f.get("registers"); v.n != nil {
		if s, ok := d.choice(v, "register table", "input", "holding"); ok {
			st.Table = s
		}
	}
	bits := d.fields(f.required("bits"), bitKeys()...)
	for k, bv := range bits.vals {
		bit, _ := strconv.Atoi(k)
		if s, ok := d.choice(bv, "status flag", StatusFlags...); ok {
			st.Bits[bit] = s
		}
	}
	if bits.ok && len(bits.vals) == 0 && !d.failed[bits.v.path] {
		d.errorf(bits.v, "no bits (map bit numbers 0..15 to flags such as 0: detector_saturated)")
	}
	return st
}

func bitKeys() []string {
	keys := make([]string, 16)
	for i := range keys {
		keys[i] = strconv.Itoa(i)
	}
	return keys
}

// extra decodes one extra value.
func (d *decoder) extra(v val) Extra {
	e := Extra{Kind: "value"}
	if v.n == nil {
		d.errorf(v, "empty entry (want a mapping with name and signal)")
		return e
	}
	f := d.fields(v, "name", "kind", "registers", "signal", "warn_above", "expect", "tolerance")
	if v := f.required("name"); v.n != nil {
		if s, ok := d.str(v); ok && d.topicLevel(v, s, false) {
			e.Name = s
		}
	}
	if v := f.get("kind"); v.n != nil {
		if s, ok := d.choice(v, "kind", "head_temperature", "setting", "value"); ok {
			e.Kind = s
		}
	}
	if v := f.get("registers"); v.n != nil {
		if s, ok := d.choice(v, "register table", "input", "holding"); ok {
			e.Table = s
		}
	}
	if v := f.required("signal"); v.n != nil {
		e.Signal = d.signal(v)
	}
	warn, expect, tol := f.get("warn_above"), f.get("expect"), f.get("tolerance")
	if warn.n != nil {
		if e.Kind != "head_temperature" {
			d.errorf(warn, "goes with kind: head_temperature")
		} else if x, ok := d.temperature(warn); ok {
			e.WarnAbove = x
		}
	}
	if expect.n != nil || tol.n != nil {
		if e.Kind != "setting" {
			d.errorf(v, "expect and tolerance go with kind: setting")
		} else {
			if x, ok := d.number(f.required("expect")); ok {
				e.Expect = x
			}
			if tol.n != nil {
				if x, ok := d.number(tol); ok {
					if x < 0 {
						d.errorf(tol, "must not be negative")
					} else {
						e.Tolerance = x
					}
				}
			}
		}
	} else if e.Kind == "setting" && f.ok {
		d.errorf(v, "a setting needs expect (the value it must read back)")
	}
	return e
}

// faults decodes a simulated head's faults.
func (d *decoder) faults(v val) []Fault {
	var out []Fault
	for _, it := range d.list(v) {
		if it.n == nil {
			d.errorf(it, "empty entry (want a fault such as {kind: silent, at: 20s, for: 5s})")
			continue
		}
		f := d.fields(it, "kind", "code", "delay", "at", "for", "period", "every")
		ft := Fault{}
		if kv := f.required("kind"); kv.n != nil {
			if s, ok := d.choice(kv, "fault", "silent", "late", "crc", "exception", "truncated"); ok {
				ft.Kind = s
			}
		}
		code, delay := f.get("code"), f.get("delay")
		switch {
		case ft.Kind == "exception":
			if x, ok := d.integer(f.required("code"), 1, 255); ok {
				if !slices.Contains([]int64{1, 2, 3, 4, 5, 6, 8, 10, 11}, x) {
					d.errorf(code, "%d is not a Modbus exception code (want 1, 2, 3, 4, 5, 6, 8, 10 or 11)", x)
				} else {
					ft.Code = byte(x)
				}
			}
		case code.n != nil:
			d.errorf(code, "goes with kind: exception")
		}
		switch {
		case ft.Kind == "late":
			if x, ok := d.positiveDuration(f.required("delay")); ok {
				ft.Delay = x
			}
		case delay.n != nil:
			d.errorf(delay, "goes with kind: late")
		}
		for key, dst := range map[string]*time.Duration{"at": &ft.At, "for": &ft.For, "period": &ft.Period} {
			if dv := f.get(key); dv.n != nil {
				if x, ok := d.duration(dv); ok {
					if x < 0 {
						d.errorf(dv, "must not be negative")
					} else {
						*dst = x
					}
				}
			}
		}
		if ev := f.get("every"); ev.n != nil {
			if x, ok := d.integer(ev, 1, 1000000); ok {
				ft.Every = int(x)
			}
		}
		if ft.Period > 0 && ft.For > ft.Period {
			d.errorf(f.get("for"), "%s is longer than the period %s", ft.For, ft.Period)
		}
		out = append(out, ft)
	}
	return out
}

// episodes decodes simulated status-flag episodes.
func (d *decoder) episodes(v val) []BitEpisode {
	var out []BitEpisode
	for _, it := range d.list(v) {
		f := d.fields(it, "flag", "at", "for", "period")
		var ep BitEpisode
		if fv := f.required("flag"); fv.n != nil {
			if s, ok := d.choice(fv, "status flag", StatusFlags...); ok {
				ep.Flag = s
			}
		}
		for key, dst := range map[string]*time.Duration{"at": &ep.At, "for": &ep.For, "period": &ep.Period} {
			if dv := f.get(key); dv.n != nil {
				if x, ok := d.duration(dv); ok {
					*dst = x
				}
			}
		}
		out = append(out, ep)
	}
	return out
}

// checkStatusEpisodes checks that each simulated status flag has a bit in
// the head's status word.
func (d *decoder) checkStatusEpisodes(h *Head, hp string) {
	for i, ep := range h.Sim.StatusFlags {
		if ep.Flag == "" {
			continue
		}
		p := join(index(join(hp, "sim.status"), i), "flag")
		if h.Status == nil {
			d.errorAt(d.line(p), p, "the head has no status word to show %s in", ep.Flag)
			continue
		}
		found := false
		for _, f := range h.Status.Bits {
			found = found || f == ep.Flag
		}
		if !found {
			d.errorAt(d.line(p), p, "no bit of the status word raises %s", ep.Flag)
		}
	}
}

// describeSpan is a register span for messages.
func describeSpan(table string, a, n int) string {
	return fmt.Sprintf("%s registers %s", table, span(a, n))
}
