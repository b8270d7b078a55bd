package config

import (
	"fmt"
	"slices"
	"strings"
)

// maxBlock is the most registers one read may ask for: Read Holding
// Registers and Read Input Registers take a quantity of 1 to 125 (Modbus
// Application Protocol Specification V1.1b3, sections 6.3 and 6.4). A head
// is read in one request, so its signals must fit one such block.
const maxBlock = 125

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
		if !d.failed[join(hp, "channels")] && len(h.Channels) >= 2 && len(h.Channels) <= maxChannels {
			d.channels(c, h, hp)
		}
	}
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
	lo, hi := 65536, -1
	for k, ch := range h.Channels {
		n := ch.Signal.Registers()
		a := int(ch.Signal.Address)
		lo, hi = min(lo, a), max(hi, a+n-1)
		for j := range k {
			other := h.Channels[j].Signal
			b, m := int(other.Address), other.Registers()
			if a <= b+m-1 && b <= a+n-1 {
				p := join(index(cp, k), "signal.address")
				d.errorAt(d.line(p), p, "registers %s overlap channel %q (registers %s)",
					span(a, n), h.Channels[j].Name, span(b, m))
			}
		}
	}
	if hi-lo+1 > maxBlock {
		d.errorAt(d.line(cp), cp, "signals span registers %d..%d (%d registers; one read covers at most %d)",
			lo, hi, hi-lo+1, maxBlock)
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
