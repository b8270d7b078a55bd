package config

import (
	"time"

	"glowgate/alarms"
)

// AlarmRule is one alarm of a head (alarms.Rule in the configuration's
// terms). Setpoint is in K for the temperature kinds, K/s for the rates
// and K of difference for a deviation.
type AlarmRule struct {
	Name          string
	Kind          string // see alarms.ParseKind: high, high_high, low, low_low, rate_rise, rate_fall, deviation, no_data, low_signal, nongrey, over_range, below_range, bad_quality
	Setpoint      float64
	Deadband      float64 // K (K/s for the rates)
	OnDelay       time.Duration
	OffDelay      time.Duration
	Priority      string // low, medium, high, urgent
	Latching      bool
	Message       string
	Realarm       time.Duration
	Window        time.Duration // rates
	Periods       int           // no_data: poll periods without data
	OtherHead     string        // deviation: the head that watches the same target
	SuppressBelow float64       // K: suppressed by design while the temperature is below this (process idle); 0: never
}

// alarmRules decodes a head's alarms.
func (d *decoder) alarmRules(v val) []AlarmRule {
	var out []AlarmRule
	for _, it := range d.list(v) {
		if it.n == nil {
			d.errorf(it, "empty entry (want an alarm such as {name: high, kind: high, setpoint: 1550degC})")
			continue
		}
		f := d.fields(it, "name", "kind", "setpoint", "deadband", "on_delay", "off_delay", "priority",
			"latching", "message", "realarm", "window", "periods", "other_head", "suppress_below")
		r := AlarmRule{Priority: "medium", Periods: 3}
		if nv := f.required("name"); nv.n != nil {
			if s, ok := d.str(nv); ok && d.topicLevel(nv, s, false) {
				r.Name = s
			}
		}
		kind := alarms.Kind(0)
		if kv := f.required("kind"); kv.n != nil {
			if s, ok := d.str(kv); ok {
				k, err := alarms.ParseKind(s)
				if err != nil {
					d.errorf(kv, "%v", err)
				} else {
					r.Kind, kind = s, k
				}
			}
		}
		sp := f.get("setpoint")
		switch kind {
		case alarms.High, alarms.HighHigh, alarms.Low, alarms.LowLow:
			if x, ok := d.temperature(f.required("setpoint")); ok {
				r.Setpoint = x
			}
		case alarms.RateRise, alarms.RateFall:
			if x, ok := d.rate(f.required("setpoint")); ok {
				r.Setpoint = x
			}
			if wv := f.required("window"); wv.n != nil {
				if x, ok := d.positiveDuration(wv); ok {
					r.Window = x
				}
			}
		case alarms.Deviation:
			if x, ok := d.temperatureDifference(f.required("setpoint")); ok {
				r.Setpoint = x
			}
			if ov := f.required("other_head"); ov.n != nil {
				if s, ok := d.str(ov); ok {
					r.OtherHead = s
				}
			}
		default:
			if sp.n != nil && kind != 0 {
				d.errorf(sp, "a %s alarm takes no setpoint", r.Kind)
			}
		}
		if dv := f.get("deadband"); dv.n != nil {
			var x float64
			var ok bool
			if kind == alarms.RateRise || kind == alarms.RateFall {
				x, ok = d.rate(dv)
			} else {
				x, ok = d.temperatureDifference(dv)
			}
			if ok {
				r.Deadband = x
			}
		}
		for key, dst := range map[string]*time.Duration{"on_delay": &r.OnDelay, "off_delay": &r.OffDelay, "realarm": &r.Realarm} {
			if dv := f.get(key); dv.n != nil {
				if x, ok := d.duration(dv); ok {
					*dst = x
				}
			}
		}
		if pv := f.get("priority"); pv.n != nil {
			if s, ok := d.str(pv); ok {
				if _, err := alarms.ParsePriority(s); err != nil {
					d.errorf(pv, "%v", err)
				} else {
					r.Priority = s
				}
			}
		}
		if lv := f.get("latching"); lv.n != nil {
			if b, ok := d.boolean(lv); ok {
				r.Latching = b
			}
		}
		if mv := f.get("message"); mv.n != nil {
			if s, ok := d.str(mv); ok {
				r.Message = s
			}
		}
		if pv := f.get("periods"); pv.n != nil {
			if x, ok := d.integer(pv, 1, 1000); ok {
				r.Periods = int(x)
			}
		}
		if sv := f.get("suppress_below"); sv.n != nil {
			if x, ok := d.temperature(sv); ok {
				r.SuppressBelow = x
			}
		}
		out = append(out, r)
	}
	return out
}

// checkAlarms checks what spans heads: unique alarm names per head, and
// that a deviation's other head exists.
func (d *decoder) checkAlarms(c *Config, h *Head, hp string) {
	seen := map[string]bool{}
	for i, r := range h.Alarms {
		p := index(join(hp, "alarms"), i)
		if r.Name != "" && seen[r.Name] {
			d.errorAt(d.line(join(p, "name")), join(p, "name"), "duplicate alarm name %q in this head", r.Name)
		}
		seen[r.Name] = true
		if r.Name != "" && r.Kind != "" && !d.failed[p] {
			if rule, err := r.Rule(h.Period); err == nil {
				if _, err := alarms.NewAlarm(rule); err != nil {
					d.errorAt(d.line(p), p, "%v", err)
				}
			}
		}
		if r.OtherHead != "" {
			if _, ok := c.Head(r.OtherHead); !ok || r.OtherHead == h.Name {
				op := join(p, "other_head")
				d.errorAt(d.line(op), op, "no other head %q to compare with", r.OtherHead)
			}
		}
	}
}

// Rule is the alarms package's form of the rule, for a head polled every
// period.
func (r AlarmRule) Rule(period time.Duration) (alarms.Rule, error) {
	kind, err := alarms.ParseKind(r.Kind)
	if err != nil {
		return alarms.Rule{}, err
	}
	prio, err := alarms.ParsePriority(r.Priority)
	if err != nil {
		return alarms.Rule{}, err
	}
	rule := alarms.Rule{
		Name: r.Name, Kind: kind, Setpoint: r.Setpoint, Deadband: r.Deadband,
		OnDelay: r.OnDelay, OffDelay: r.OffDelay, Priority: prio, Latching: r.Latching,
		Message: r.Message, Realarm: r.Realarm, Window: r.Window,
	}
	if kind == alarms.NoData {
		rule.Periods, rule.Period = r.Periods, period
	}
	if r.SuppressBelow > 0 {
		rule.SuppressWhen.Below = r.SuppressBelow
	}
	return rule, nil
}
