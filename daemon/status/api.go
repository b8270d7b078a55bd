package status

import (
	"encoding/json"
	"net/http"
	"strconv"
	"time"
)

// serveState answers GET /api/state:
//
//	{"gateway":…,"version":…,"actions":bool,"now":RFC 3339,"seq":N,
//	 "heads":[…],"readings":[{"reading":…,"glow":…},…],"alarms":[…],"health":{…}}
//
// actions tells the page whether to offer the operator login; seq is the
// live stream's sequence number to resume from (?since=).
func (s *Server) serveState(w http.ResponseWriter, r *http.Request) {
	health := s.healthJSON()
	s.mu.Lock()
	buf := make([]byte, 0, 1024+len(s.headsJSON)+len(s.alarmsJSON)+len(s.order)*1024)
	buf = append(buf, `{"gateway":`...)
	buf = appendJSONString(buf, s.o.Gateway)
	buf = append(buf, `,"version":`...)
	buf = appendJSONString(buf, s.o.Version)
	buf = append(buf, `,"actions":`...)
	buf = strconv.AppendBool(buf, s.actionsOn())
	buf = append(buf, `,"now":`...)
	buf = appendJSONString(buf, s.now().UTC().Format(time.RFC3339Nano))
	buf = append(buf, `,"seq":`...)
	buf = strconv.AppendUint(buf, s.next, 10)
	buf = append(buf, `,"heads":`...)
	buf = append(buf, s.headsJSON...)
	buf = append(buf, `,"readings":[`...)
	first := true
	for _, name := range s.order {
		if h := s.heads[name]; h.latest != nil {
			if !first {
				buf = append(buf, ',')
			}
			first = false
			buf = append(buf, h.latest...)
		}
	}
	buf = append(buf, `],"alarms":`...)
	buf = append(buf, s.alarmsJSON...)
	s.mu.Unlock()
	buf = append(buf, `,"health":`...)
	buf = append(buf, health...)
	buf = append(buf, '}')
	writeJSON(w, http.StatusOK, buf)
}

// actionsOn reports whether operator actions can be taken at all.
func (s *Server) actionsOn() bool { return s.o.Token != "" && s.o.Act != nil }

// serveHistory answers GET /api/history. With ?head=NAME:
//
//	{"head":…,"unit":…,"channels":[…],"t":[ms…],"temperature":[…],
//	 "raw_temperature":[…],"signal_fraction":[[…],…]}
//
// without: {"heads":[{"head":…,"unit":…,"t":[…],"temperature":[…]},…]}
// for the sparklines. ?minutes= (1..60, default 60) limits the span back
// from the newest point of each head; ?step= (1..60 s, default 1) keeps
// the newest point of each step. Times are unix milliseconds; a missing
// value is null.
func (s *Server) serveHistory(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	minutes, err := intParam(q.Get("minutes"), 60, 1, 60)
	if err != nil {
		http.Error(w, "minutes: "+err.Error(), http.StatusBadRequest)
		return
	}
	step, err := intParam(q.Get("step"), 1, 1, 60)
	if err != nil {
		http.Error(w, "step: "+err.Error(), http.StatusBadRequest)
		return
	}
	span, stepMS := int64(minutes)*60_000, int64(step)*1000
	name, one := q.Get("head"), q.Has("head")

	s.mu.Lock()
	defer s.mu.Unlock()
	var buf []byte
	if one {
		h := s.heads[name]
		if h == nil {
			http.Error(w, "no head "+strconv.Quote(name), http.StatusNotFound)
			return
		}
		buf = append(buf, `{"head":`...)
		buf = appendJSONString(buf, h.name)
		buf = append(buf, `,"unit":`...)
		buf = appendJSONString(buf, h.unit)
		buf = append(buf, `,"channels":[`...)
		for i, c := range h.channels {
			if i > 0 {
				buf = append(buf, ',')
			}
			buf = appendJSONString(buf, c)
		}
		buf = append(buf, "],"...)
		buf = h.hist.appendJSON(buf, h.hist.selectPoints(h.newest()-span, stepMS), true)
		buf = append(buf, '}')
	} else {
		buf = append(buf, `{"heads":[`...)
		for i, name := range s.order {
			h := s.heads[name]
			if i > 0 {
				buf = append(buf, ',')
			}
			buf = append(buf, `{"head":`...)
			buf = appendJSONString(buf, h.name)
			buf = append(buf, `,"unit":`...)
			buf = appendJSONString(buf, h.unit)
			buf = append(buf, ',')
			buf = h.hist.appendJSON(buf, h.hist.selectPoints(h.newest()-span, stepMS), false)
			buf = append(buf, '}')
		}
		buf = append(buf, "]}"...)
	}
	writeJSON(w, http.StatusOK, buf)
}

// newest is the time of the newest history point, unix ms (0 when none).
func (h *headState) newest() int64 {
	if h.hist.n == 0 {
		return 0
	}
	return h.hist.t[h.hist.last()]
}

func intParam(v string, def, lo, hi int) (int, error) {
	if v == "" {
		return def, nil
	}
	n, err := strconv.Atoi(v)
	if err != nil || n < lo || n > hi {
		return 0, &rangeError{v, lo, hi}
	}
	return n, nil
}

type rangeError struct {
	v      string
	lo, hi int
}

func (e *rangeError) Error() string {
	return strconv.Quote(e.v) + " is not a whole number from " + strconv.Itoa(e.lo) + " to " + strconv.Itoa(e.hi)
}

func writeJSON(w http.ResponseWriter, code int, body []byte) {
	h := w.Header()
	h.Set("Content-Type", "application/json")
	h.Set("Cache-Control", "no-store")
	w.WriteHeader(code)
	w.Write(body)
}

// appendJSONString appends s as a JSON string, escaped the way
// encoding/json escapes (HTML-safe).
func appendJSONString(dst []byte, s string) []byte {
	b, _ := json.Marshal(s) // a string always encodes
	return append(dst, b...)
}
