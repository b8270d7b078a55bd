package config

import (
	"fmt"
	"slices"
	"strings"
)

// validate checks what spans fields: unique names, references between
// sections, the order and register layout of channels. Checks whose inputs
// already failed are skipped, so one mistake gives one message.
func (d *decoder) validate(c *Config) {
	endpointAt := map[string]int{}
	for i, ep := range c.Endpoints {
		p := join(index("endpoints", i), "name")
		if ep.Name == "" || d.failed[p] {
			continue
		}
		if j, dup := endpointAt[ep.Name]; dup {
			d.errorAt(d.line(p), p, "duplicate endpoint name %q (first at line %d)",
				ep.Name, d.line(join(index("endpoints", j), "name")))
			continue
		}
		endpointAt[ep.Name] = i
	}
	lineAt := map[string]int{}
	for i, l := range c.Lines {
		p := join(index("lines", i), "name")
		if l.Name == "" || d.failed[p] {
			continue
		}
		if j, dup := lineAt[l.Name]; dup {
			d.errorAt(d.line(p), p, "duplicate line name %q (first at line %d)",
				l.Name, d.line(join(index("lines", j), "name")))
			continue
		}
		lineAt[l.Name] = i
	}
	// unitAt finds two heads answering to one unit id on one bus.
	unitAt := map[string]int{}
	headAt := map[string]int{}
	for i := range c.Heads {
		h := &c.Heads[i]
		hp := index("heads", i)
		if p := join(hp, "name"); h.Name != "" && !d.failed[p] {
			if j, dup := headAt[h.Name]; dup {
				d.errorAt(d.line(p), p, "duplicate head name %q (first at line %d)",
					h.Name, d.line(join(index("heads", j), "name")))
			} else {
				headAt[h.Name] = i
			}
		}
		if p := join(hp, "endpoint"); h.Endpoint != "" && !d.failed[p] {
			if _, ok := endpointAt[h.Endpoint]; !ok && !d.failed["endpoints"] {
				d.errorAt(d.line(p), p, "unknown endpoint %q (%s)", h.Endpoint, known(c.Endpoints))
			}
		}
		if p := join(hp, "line"); h.Line != "" && !d.failed[p] {
			if _, ok := lineAt[h.Line]; !ok && !d.failed["lines"] {
				d.errorAt(d.line(p), p, "unknown line %q (%s)", h.Line, knownLines(c.Lines))
			}
		}
		if p := join(hp, "unit_id"); h.Line != "" && h.UnitID == 0 && !d.failed[p] {
			// Modbus over serial line V1.02, 2.2: 0 is the broadcast
			// address, which no slave answers.
			d.errorAt(d.line(p), p, "a head on a line needs a unit id from 1 to 247 (0 is the broadcast address)")
		}
		if bus := h.Endpoint + "\x00" + h.Line; h.Name != "" && !d.failed[join(hp, "name")] && !d.failed[join(hp, "unit_id")] {
			key := bus + "\x00" + fmt.Sprint(h.UnitID)
			if j, dup := unitAt[key]; dup {
				p := join(hp, "unit_id")
				d.errorAt(d.line(p), p, "unit id %d is taken by head %q on the same %s", h.UnitID, c.Heads[j].Name, busWord(h))
			} else {
				unitAt[key] = i
			}
		}
		if !d.failed[join(hp, "channels")] && len(h.Channels) >= 2 && len(h.Channels) <= maxChannels {
			d.channels(c, h, hp)
			d.registerMap(h, hp)
		}
		d.checkStatusEpisodes(h, hp)
		d.checkAlarms(c, h, hp)
	}
}

func busWord(h *Head) string {
	if h.Line != "" {
		return "line"
	}
	return "endpoint"
}

// knownLines lists the line names for a message.
func knownLines(ls []Line) string {
	var names []string
	for _, l := range ls {
		if l.Name != "" && !slices.Contains(names, l.Name) {
			names = append(names, l.Name)
		}
	}
	if len(names) == 0 {
		return "no lines are defined"
	}
	return "have " + strings.Join(names, ", ")
}

// known lists the endpoint names for a message.
func known(eps []Endpoint) string {
	var names []string
	for _, ep := range eps {
		if ep.Name != "" && !slices.Contains(names, ep.Name) {
			names = append(names, ep.Name)
		}
	}
	if len(names) == 0 {
		return "no endpoints are defined"
	}
	return "have " + strings.Join(names, ", ")
}

// channels checks a head's well-formed channels against each other and
// against its range.
func (d *decoder) channels(c *Config, h *Head, hp string) {
	cp := join(hp, "channels")
	for k := 1; k < len(h.Channels); k++ {
		a, b := h.Channels[k-1], h.Channels[k]
		p := index(cp, k)
		if a.Name == b.Name {
			np := join(p, "name")
			d.errorAt(d.line(np), np, "duplicate channel name %q (first at line %d)",
				b.Name, d.line(join(index(cp, k-1), "name")))
		}
		if la, lb := a.Wavelength(), b.Wavelength(); lb <= la {
			d.errorAt(d.line(p), p, "channel %q at %s must come before channel %q at %s (list channels short wavelength first)",
				b.Name, fmtLength(lb), a.Name, fmtLength(la))
		}
	}
	if d.failed[join(hp, "range")] || h.RangeMin <= 0 {
		return
	}
	for k, ch := range h.Channels {
		sh := ch.SakumaHattori
		// S(T) = C/(exp(c2/(A·T + B)) − 1) needs A·T + B > 0 over the range;
		// A > 0, so the least value is at the range minimum.
		if sh != nil && sh.A*h.RangeMin+sh.B <= 0 {
			p := join(index(cp, k), "sakuma_hattori.b")
			d.errorAt(d.line(p), p, "a·T + b is not positive at the range minimum %s (%sumK)",
				fmtTemperature(h.RangeMin), fmtNum(roundSig((sh.A*h.RangeMin+sh.B)*1e6)))
		}
	}
}

// span writes a register span: "4" or "4..5".
func span(a, n int) string {
	if n <= 1 {
		return fmt.Sprint(a)
	}
	return fmt.Sprintf("%d..%d", a, a+n-1)
}

// mapEntry is one field of a head's register map, for the overlap check.
type mapEntry struct {
	what, path string
	table      string
	addr, n    int
}

// registerMap refuses fields of a head that share a register: channel
// signals, the status word and the extras, per register table. The reads
// themselves are coalesced into blocks of at most 125 registers (the most
// one Read Holding/Input Registers may ask for: Modbus Application
// Protocol V1.1b3, 6.3 and 6.4) when the daemon builds the head.
func (d *decoder) registerMap(h *Head, hp string) {
	var entries []mapEntry
	table := func(t string) string {
		if t == "" {
			return h.Registers
		}
		return t
	}
	for k, ch := range h.Channels {
		entries = append(entries, mapEntry{fmt.Sprintf("channel %q", ch.Name), join(index(join(hp, "channels"), k), "signal.address"),
			h.Registers, int(ch.Signal.Address), ch.Signal.Registers()})
	}
	if h.Status != nil {
		entries = append(entries, mapEntry{"the status word", join(hp, "status.address"), table(h.Status.Table), int(h.Status.Address), 1})
	}
	for k, e := range h.Extras {
		entries = append(entries, mapEntry{fmt.Sprintf("extra %q", e.Name), join(index(join(hp, "extras"), k), "signal.address"),
			table(e.Table), int(e.Signal.Address), e.Signal.Registers()})
	}
	for k, a := range entries {
		if a.n == 0 || d.failed[a.path] {
			continue
		}
		for _, b := range entries[:k] {
			if b.n == 0 || a.table != b.table || d.failed[b.path] {
				continue
			}
			if a.addr <= b.addr+b.n-1 && b.addr <= a.addr+a.n-1 {
				d.errorAt(d.line(a.path), a.path, "%s overlaps %s (%s)",
					describeSpan(a.table, a.addr, a.n), b.what, describeSpan(b.table, b.addr, b.n))
			}
		}
	}
}
