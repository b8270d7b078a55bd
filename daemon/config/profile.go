package config

import "time"

// Duration is the time one pass through the segments takes.
func (p Profile) Duration() time.Duration {
	var total time.Duration
	for _, s := range p.Segments {
		total += s.Duration
	}
	return total
}

// At is the profile's value t after its start. Before the start (t < 0)
// it is Start. A ramp interpolates linearly from the value reached before
// it; a step takes effect at its instant. Without Repeat the last value
// holds after the last segment; with Repeat (and a positive Duration) the
// pass restarts from Start.
func (p Profile) At(t time.Duration) float64 {
	if t < 0 {
		return p.Start
	}
	if total := p.Duration(); p.Repeat && total > 0 {
		t %= total
	}
	v := p.Start
	for _, s := range p.Segments {
		switch s.Kind {
		case "hold":
			if t < s.Duration {
				return v
			}
		case "ramp":
			if t < s.Duration {
				return v + (s.Value-v)*float64(t)/float64(s.Duration)
			}
			v = s.Value
		case "step":
			v = s.Value
		}
		t -= s.Duration
	}
	return v
}
