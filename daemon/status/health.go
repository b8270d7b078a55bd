package status

import (
	"fmt"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"glowgate/bus/modbus"
)

// lineHealth is the state of one field-bus line as the page shows it,
// derived from its counters (SetLineStats).
type lineHealth struct {
	Name         string
	Heads        int     // polls on the line (one per head)
	Failing      int     // of them, those whose last poll failed
	PollsPerS    float64 // polls completed per second, failed ones included
	FailuresPerS float64 // failed polls per second
	Failures     uint64  // failed polls since start
	MeanMS       float64 // mean transaction time, ms
	Busy         float64 // fraction of time with a transaction in flight
}

// lineRates turns the lines' counters into rates: two samples at least
// a second apart, refreshed when asked.
type lineRates struct {
	mu         sync.Mutex
	prev, cur  map[string]lineSample
	prevT      time.Time
	curT       time.Time
	hasSamples bool
}

type lineSample struct{ polls, failures uint64 }

// lines returns the health of every line, in the order the stats
// function gives them; nil without one.
func (s *Server) lines() []lineHealth {
	s.mu.Lock()
	f := s.lineStats
	s.mu.Unlock()
	if f == nil {
		return nil
	}
	stats := f()
	now := time.Now() // rates are taken on the runtime clock, like the lines' own
	sample := make(map[string]lineSample, len(stats))
	out := make([]lineHealth, 0, len(stats))
	for _, ls := range stats {
		lh := lineHealth{Name: ls.Name, Heads: len(ls.Polls), Busy: ls.Busy()}
		var smp lineSample
		for _, p := range ls.Polls {
			smp.polls += p.Polls
			smp.failures += p.Failures
			if p.Failing {
				lh.Failing++
			}
		}
		lh.Failures = smp.failures
		lh.MeanMS = float64(ls.Times.Mean()) / float64(time.Millisecond)
		sample[ls.Name] = smp
		out = append(out, lh)
	}

	r := &s.rates
	r.mu.Lock()
	defer r.mu.Unlock()
	if !r.hasSamples || now.Sub(r.curT) >= time.Second {
		r.prev, r.prevT = r.cur, r.curT
		r.cur, r.curT = sample, now
		r.hasSamples = true
	}
	for i := range out {
		ls := stats[i]
		p, okPrev := r.prev[ls.Name]
		c, okCur := r.cur[ls.Name]
		if dt := r.curT.Sub(r.prevT).Seconds(); okPrev && okCur && dt > 0 && c.polls >= p.polls && c.failures >= p.failures {
			out[i].PollsPerS = float64(c.polls-p.polls) / dt
			out[i].FailuresPerS = float64(c.failures-p.failures) / dt
		} else if run := ls.Running.Seconds(); run > 0 {
			// Until a second sample: the average since the line started.
			cur := sample[ls.Name]
			out[i].PollsPerS = float64(cur.polls) / run
			out[i].FailuresPerS = float64(cur.failures) / run
		}
	}
	return out
}

// degraded returns the reasons the gateway is degraded, none when it is
// healthy: no health report yet, the broker disconnected, the outbox's
// oldest message older than MaxOutboxAge, a line whose every head fails,
// and the reasons the daemon gave.
func (s *Server) degraded(lines []lineHealth) []string {
	s.mu.Lock()
	h, set := s.health, s.healthSet
	s.mu.Unlock()
	var why []string
	if !set {
		why = append(why, "no health report from the daemon yet")
	} else {
		if !h.BrokerConnected {
			why = append(why, "broker disconnected")
		}
		if h.OutboxOldest > s.o.MaxOutboxAge {
			why = append(why, fmt.Sprintf("oldest unpublished message is %s old (limit %s)", h.OutboxOldest.Round(time.Second), s.o.MaxOutboxAge))
		}
	}
	for _, l := range lines {
		if l.Heads > 0 && l.Failing == l.Heads {
			why = append(why, fmt.Sprintf("line %s: every head failing", l.Name))
		}
	}
	for _, d := range h.Degraded {
		if d = strings.TrimSpace(d); d != "" {
			why = append(why, d)
		}
	}
	return why
}

// healthJSON encodes the health object of the API:
//
//	{"status":"ok"|"degraded","reasons":[…],"broker_connected":…,"broker":…,
//	 "outbox_depth":…,"outbox_oldest_s":…,"outbox_dropped":…,"published":…,
//	 "lines":[{"name":…,"heads":…,"failing":…,"polls_per_s":…,
//	           "failures_per_s":…,"failures":…,"mean_ms":…,"busy":…},…]}
func (s *Server) healthJSON() []byte {
	lines := s.lines()
	why := s.degraded(lines)
	s.mu.Lock()
	h := s.health
	s.mu.Unlock()
	buf := make([]byte, 0, 256+160*len(lines))
	buf = append(buf, `{"status":`...)
	if len(why) == 0 {
		buf = append(buf, `"ok"`...)
	} else {
		buf = append(buf, `"degraded"`...)
	}
	buf = append(buf, `,"reasons":[`...)
	for i, w := range why {
		if i > 0 {
			buf = append(buf, ',')
		}
		buf = appendJSONString(buf, w)
	}
	buf = append(buf, `],"broker_connected":`...)
	buf = strconv.AppendBool(buf, h.BrokerConnected)
	buf = append(buf, `,"broker":`...)
	buf = appendJSONString(buf, h.Broker)
	buf = append(buf, `,"outbox_depth":`...)
	buf = strconv.AppendInt(buf, int64(h.OutboxDepth), 10)
	buf = append(buf, `,"outbox_oldest_s":`...)
	buf = appendNumber(buf, h.OutboxOldest.Seconds(), 64)
	buf = append(buf, `,"outbox_dropped":`...)
	buf = strconv.AppendUint(buf, h.OutboxDropped, 10)
	buf = append(buf, `,"published":`...)
	buf = strconv.AppendUint(buf, h.Published, 10)
	buf = append(buf, `,"lines":[`...)
	for i, l := range lines {
		if i > 0 {
			buf = append(buf, ',')
		}
		buf = append(buf, `{"name":`...)
		buf = appendJSONString(buf, l.Name)
		buf = append(buf, `,"heads":`...)
		buf = strconv.AppendInt(buf, int64(l.Heads), 10)
		buf = append(buf, `,"failing":`...)
		buf = strconv.AppendInt(buf, int64(l.Failing), 10)
		buf = append(buf, `,"polls_per_s":`...)
		buf = appendNumber(buf, l.PollsPerS, 32)
		buf = append(buf, `,"failures_per_s":`...)
		buf = appendNumber(buf, l.FailuresPerS, 32)
		buf = append(buf, `,"failures":`...)
		buf = strconv.AppendUint(buf, l.Failures, 10)
		buf = append(buf, `,"mean_ms":`...)
		buf = appendNumber(buf, l.MeanMS, 32)
		buf = append(buf, `,"busy":`...)
		buf = appendNumber(buf, l.Busy, 32)
		buf = append(buf, '}')
	}
	return append(buf, "]}"...)
}

// serveHealthz answers GET /healthz: 200 "ok", or 503 "degraded: " and
// the reasons separated by "; ".
func (s *Server) serveHealthz(w http.ResponseWriter, r *http.Request) {
	why := s.degraded(s.lines())
	h := w.Header()
	h.Set("Content-Type", "text/plain; charset=utf-8")
	h.Set("Cache-Control", "no-store")
	if len(why) == 0 {
		w.Write([]byte("ok\n"))
		return
	}
	w.WriteHeader(http.StatusServiceUnavailable)
	w.Write([]byte("degraded: " + strings.Join(why, "; ") + "\n"))
}

// lineStatsNow calls the stats function, if any.
func (s *Server) lineStatsNow() []modbus.LineStats {
	s.mu.Lock()
	f := s.lineStats
	s.mu.Unlock()
	if f == nil {
		return nil
	}
	return f()
}
