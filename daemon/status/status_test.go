package status

import (
	"context"
	"encoding/json"
	"net/http"
	"strconv"
	"strings"
	"testing"
	"time"

	"glowgate/bus/mqtt"
)

var t0 = time.Date(2026, 12, 1, 22, 0, 0, 0, time.UTC)

type eventReading struct {
	Reading struct {
		Head        string   `json:"head"`
		Seq         uint64   `json:"seq"`
		Temperature *float64 `json:"temperature"`
		Unit        string   `json:"unit"`
	} `json:"reading"`
	Glow *string `json:"glow"`
}

func TestStreamDeliversReadings(t *testing.T) {
	s, ts := startServer(t, Options{})
	s.SetHeads(headInfos())
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	st := openStream(t, ctx, ts.URL+"/api/events")

	// On connecting: the heads, the alarms and the health.
	heads := st.until(t, "heads")
	var hl []struct{ Name string }
	if err := json.Unmarshal([]byte(heads.data), &hl); err != nil || len(hl) != 3 || hl[2].Name != "kiln-zone" {
		t.Fatalf("heads event %q: %v", heads.data, err)
	}
	st.until(t, "alarms")
	st.until(t, "health")

	s.Reading(testReading("caster-strand", 1, t0, 1150, "degC", demoChannels[0], 0.75, "good"))
	ev := st.until(t, "readings")
	var list []eventReading
	if err := json.Unmarshal([]byte(ev.data), &list); err != nil {
		t.Fatalf("readings event %q: %v", ev.data, err)
	}
	if len(list) != 1 || list[0].Reading.Head != "caster-strand" || *list[0].Reading.Temperature != 1150 {
		t.Fatalf("readings event = %s, want the one reading of caster-strand at 1150", ev.data)
	}
	// The glow swatch of 1150 °C: convert.GlowColor(1423.15 K) (see its example).
	if list[0].Glow == nil || *list[0].Glow != "#ff5f00" {
		t.Errorf("glow = %v, want #ff5f00", list[0].Glow)
	}
	if ev.id == "" {
		t.Errorf("readings event without id")
	}

	// A burst of one head's readings arrives with its latest last; never
	// an older one after a newer.
	var last uint64
	for seq := uint64(2); seq <= 40; seq++ {
		s.Reading(testReading("ladle-stream", seq, t0.Add(time.Duration(seq)*time.Second), 1600+float64(seq), "degC", demoChannels[0], 0.4, "good"))
	}
	for last < 40 {
		ev := st.until(t, "readings")
		list = nil
		if err := json.Unmarshal([]byte(ev.data), &list); err != nil {
			t.Fatal(err)
		}
		seen := map[string]bool{}
		for _, e := range list {
			if seen[e.Reading.Head] {
				t.Errorf("head %s twice in one batch", e.Reading.Head)
			}
			seen[e.Reading.Head] = true
			if e.Reading.Seq <= last {
				t.Fatalf("seq %d after %d", e.Reading.Seq, last)
			}
			last = e.Reading.Seq
		}
	}
}

func TestStreamResumesAndResyncs(t *testing.T) {
	s, ts := startServer(t, Options{})
	s.Reading(testReading("caster-strand", 1, t0, 1150, "degC", demoChannels[0], 0.75, "good"))
	s.Reading(testReading("kiln-zone", 2, t0, 1300, "K", demoChannels[1], 0.9, "good"))
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()

	// Resuming from sequence 1 sends the second reading only.
	st := openStream(t, ctx, ts.URL+"/api/events?since=1")
	ev := st.until(t, "readings")
	if !strings.Contains(ev.data, `"head":"kiln-zone"`) || strings.Contains(ev.data, `"head":"caster-strand"`) {
		t.Errorf("resumed batch = %s, want kiln-zone only", ev.data)
	}
	if ev.id != "2" {
		t.Errorf("id = %q, want 2", ev.id)
	}

	// A stream further behind than the ring is told to resync.
	for i := 0; i < ringSize+10; i++ {
		s.Reading(testReading("ladle-stream", uint64(3+i), t0, 1600, "degC", demoChannels[0], 0.4, "good"))
	}
	st2 := openStream(t, ctx, ts.URL+"/api/events?since=0")
	st2.until(t, "resync")
	ev = st2.until(t, "readings")
	if !strings.Contains(ev.data, `"seq":`+strconv.Itoa(3+ringSize+9)) {
		t.Errorf("after resync the batch should hold the newest reading; got %.200s", ev.data)
	}
}

func TestStateAndHistory(t *testing.T) {
	clk := &testClock{t: t0.Add(time.Hour)}
	s, ts := startServer(t, Options{Now: clk.Now})
	s.SetHeads(headInfos())
	// 70 minutes of kiln readings, four a second: the history keeps one
	// point per second, for the last hour.
	seq := uint64(0)
	for ms := int64(0); ms < 70*60*1000; ms += 250 {
		seq++
		s.Reading(testReading("kiln-zone", seq, t0.Add(time.Duration(ms)*time.Millisecond), 1300+float64(ms%7000)/1000, "K", demoChannels[1], 0.9, "good"))
	}
	// A reading out of order is not put in the history.
	s.Reading(testReading("kiln-zone", seq+1, t0, 9999, "K", demoChannels[1], 0.9, "good"))

	resp, body := get(t, ts.URL+"/api/history?head=kiln-zone")
	if resp.StatusCode != 200 {
		t.Fatalf("history: %s %s", resp.Status, body)
	}
	var h struct {
		Head     string       `json:"head"`
		Unit     string       `json:"unit"`
		Channels []string     `json:"channels"`
		T        []int64      `json:"t"`
		Temp     []*float64   `json:"temperature"`
		Raw      []*float64   `json:"raw_temperature"`
		Frac     [][]*float64 `json:"signal_fraction"`
	}
	if err := json.Unmarshal([]byte(body), &h); err != nil {
		t.Fatalf("history JSON: %v", err)
	}
	if h.Unit != "K" || len(h.Channels) != 3 || len(h.Frac) != 3 {
		t.Fatalf("history: unit %q channels %v fractions %d", h.Unit, h.Channels, len(h.Frac))
	}
	if len(h.T) < 3599 || len(h.T) > 3601 || len(h.Temp) != len(h.T) || len(h.Raw) != len(h.T) || len(h.Frac[2]) != len(h.T) {
		t.Fatalf("history holds %d points (temps %d), want an hour at one a second", len(h.T), len(h.Temp))
	}
	for i := 1; i < len(h.T); i++ {
		if h.T[i]/1000 <= h.T[i-1]/1000 {
			t.Fatalf("two points in one second or out of order: %d, %d", h.T[i-1], h.T[i])
		}
	}
	for _, v := range h.Temp {
		if v == nil || *v == 9999 {
			t.Fatalf("history holds the out-of-order reading or a null")
		}
	}
	// Each point is the newest reading of its second (the 750 ms one).
	if h.T[len(h.T)-1]%1000 != 750 {
		t.Errorf("last point at %d ms, want the last reading of its second (…750)", h.T[len(h.T)-1])
	}

	// Sparkline form: every head, temperatures only, ten minutes at 5 s.
	_, body = get(t, ts.URL+"/api/history?minutes=10&step=5")
	var all struct {
		Heads []struct {
			Head string     `json:"head"`
			T    []int64    `json:"t"`
			Temp []*float64 `json:"temperature"`
			Raw  []*float64 `json:"raw_temperature"`
		} `json:"heads"`
	}
	if err := json.Unmarshal([]byte(body), &all); err != nil {
		t.Fatal(err)
	}
	if len(all.Heads) != 3 || all.Heads[2].Head != "kiln-zone" {
		t.Fatalf("sparkline history heads = %d", len(all.Heads))
	}
	if n := len(all.Heads[2].T); n < 119 || n > 121 || all.Heads[2].Raw != nil {
		t.Errorf("sparkline: %d points (want 120) raw %v (want none)", n, all.Heads[2].Raw != nil)
	}
	if len(all.Heads[0].T) != 0 {
		t.Errorf("a head without readings has %d points", len(all.Heads[0].T))
	}

	for _, q := range []string{"?minutes=0", "?minutes=61", "?step=x", "?head=nope"} {
		if resp, _ := get(t, ts.URL+"/api/history"+q); resp.StatusCode/100 != 4 {
			t.Errorf("history%s: %s, want a 4xx", q, resp.Status)
		}
	}

	// The state holds gateway, heads, the latest readings and the resume point.
	_, body = get(t, ts.URL+"/api/state")
	var state struct {
		Gateway  string            `json:"gateway"`
		Actions  bool              `json:"actions"`
		Seq      uint64            `json:"seq"`
		Heads    []json.RawMessage `json:"heads"`
		Readings []eventReading    `json:"readings"`
		Health   struct {
			Status string `json:"status"`
		} `json:"health"`
	}
	if err := json.Unmarshal([]byte(body), &state); err != nil {
		t.Fatalf("state JSON: %v\n%.300s", err, body)
	}
	if state.Gateway != "test-gw" || state.Actions || state.Seq != seq+1 || len(state.Heads) != 3 || len(state.Readings) != 1 || state.Health.Status != "degraded" {
		t.Errorf("state: %+v", state)
	}

	// A reload that drops a head forgets it.
	s.SetHeads(headInfos()[:2])
	if resp, _ := get(t, ts.URL+"/api/history?head=kiln-zone"); resp.StatusCode != 404 {
		t.Errorf("history of a removed head: %s, want 404", resp.Status)
	}
}

func TestHistoryRing(t *testing.T) {
	var h history
	h.reset(2)
	for i := int64(0); i < 2*historySize; i++ {
		h.add(i*1000+999, float64(i), float64(i)+1, []float64{0.5, 0.25})
	}
	if h.n != historySize {
		t.Fatalf("n = %d", h.n)
	}
	idx := h.selectPoints(0, 1000)
	if len(idx) != historySize || h.t[idx[0]] != historySize*1000+999 || h.t[idx[len(idx)-1]] != (2*historySize-1)*1000+999 {
		t.Errorf("ring holds %d points from %d to %d", len(idx), h.t[idx[0]], h.t[idx[len(idx)-1]])
	}
	// A step keeps the newest point of each bucket.
	idx = h.selectPoints(0, 60_000)
	if len(idx) != 60 || h.t[idx[1]]%60_000 != 59_999 {
		t.Errorf("60 s steps: %d points, second at %d", len(idx), h.t[idx[1]])
	}
	// Negative times (before 1970) bucket by floor.
	h.reset(0)
	h.add(-1500, 1, 1, nil)
	h.add(-1001, 2, 2, nil)
	h.add(-999, 3, 3, nil)
	if h.n != 2 || h.temp[0] != 2 {
		t.Errorf("negative times: n = %d, first %v", h.n, h.temp[0])
	}
}

func TestEscaping(t *testing.T) {
	s, ts := startServer(t, Options{Gateway: `gw"</script><script>x()</script>`})
	evil := `<script>document.title="pwned"</script><img src=x onerror=alert(1)>`
	infos := headInfos()
	infos[0].Description = evil
	infos[0].Settings = map[string]any{"note": evil, `<b>key</b>`: 1}
	s.SetHeads(infos)
	s.SetAlarms([]AlarmView{{Head: "caster-strand", Name: "<i>hot</i>", State: AlarmUnacknowledged, Priority: "high", Message: evil, Since: t0}})
	r := testReading("caster-strand", 1, t0, 1150, "degC", demoChannels[0], 0.75, "good")
	r.Flags = []string{"<svg onload=alert(1)>"}
	s.Reading(r)

	for _, path := range []string{"/api/state", "/api/history?minutes=10", "/api/history?head=caster-strand"} {
		resp, body := get(t, ts.URL+path)
		if strings.ContainsAny(body, "<>") {
			t.Errorf("%s carries a raw < or >: %.300s", path, body)
		}
		if ct := resp.Header.Get("Content-Type"); ct != "application/json" {
			t.Errorf("%s: Content-Type %q", path, ct)
		}
		var v any
		if err := json.Unmarshal([]byte(body), &v); err != nil {
			t.Errorf("%s: not JSON: %v", path, err)
		}
	}
	// The description reads back exactly (escaped in transport, not altered).
	_, body := get(t, ts.URL+"/api/state")
	var state struct {
		Gateway string `json:"gateway"`
		Heads   []struct {
			Description string         `json:"description"`
			Settings    map[string]any `json:"settings"`
		} `json:"heads"`
	}
	if err := json.Unmarshal([]byte(body), &state); err != nil {
		t.Fatal(err)
	}
	if state.Heads[0].Description != evil || state.Heads[0].Settings["note"] != evil || state.Gateway != `gw"</script><script>x()</script>` {
		t.Errorf("texts altered: %q %v %q", state.Heads[0].Description, state.Heads[0].Settings, state.Gateway)
	}
	// The page itself is static: no configuration text in it.
	resp, page := get(t, ts.URL+"/")
	if strings.Contains(page, "caster-strand") || strings.Contains(page, "pwned") || strings.Contains(page, "test-gw") {
		t.Errorf("the page embeds configuration text")
	}
	if resp.Header.Get("Content-Type") != "text/html; charset=utf-8" {
		t.Errorf("page Content-Type %q", resp.Header.Get("Content-Type"))
	}
	// The script never hands data to the HTML parser.
	_, js := get(t, ts.URL+"/static/app.js")
	for _, bad := range []string{"innerHTML", "outerHTML", "insertAdjacentHTML", "document.write", "eval(", "new Function"} {
		if strings.Contains(js, bad) {
			t.Errorf("app.js uses %s", bad)
		}
	}
}

func TestSecurityHeaders(t *testing.T) {
	s, ts := startServer(t, Options{Token: testToken, Act: func(context.Context, Action) error { return nil }})
	s.SetHealth(Health{BrokerConnected: true})
	for _, path := range []string{"/", "/static/app.js", "/static/app.css", "/api/state", "/api/history", "/metrics", "/healthz"} {
		req, _ := http.NewRequest("GET", ts.URL+path, nil)
		req.Header.Set("Origin", "http://evil.example")
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != 200 {
			t.Errorf("GET %s: %s", path, resp.Status)
		}
		if csp := resp.Header.Get("Content-Security-Policy"); !strings.HasPrefix(csp, "default-src 'self'") {
			t.Errorf("GET %s: Content-Security-Policy %q", path, csp)
		}
		if resp.Header.Get("X-Content-Type-Options") != "nosniff" {
			t.Errorf("GET %s: no nosniff", path)
		}
		for k := range resp.Header {
			if strings.HasPrefix(k, "Access-Control-") {
				t.Errorf("GET %s: CORS header %s", path, k)
			}
		}
	}
	// A preflight finds no CORS either.
	req, _ := http.NewRequest("OPTIONS", ts.URL+"/api/action", nil)
	req.Header.Set("Origin", "http://evil.example")
	req.Header.Set("Access-Control-Request-Method", "POST")
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	if resp.StatusCode == 200 || resp.StatusCode == 204 || resp.Header.Get("Access-Control-Allow-Origin") != "" {
		t.Errorf("preflight: %s, Allow-Origin %q", resp.Status, resp.Header.Get("Access-Control-Allow-Origin"))
	}
	// Assets revalidate by ETag.
	resp, _ = get(t, ts.URL+"/static/app.js")
	req, _ = http.NewRequest("GET", ts.URL+"/static/app.js", nil)
	req.Header.Set("If-None-Match", resp.Header.Get("ETag"))
	resp2, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	resp2.Body.Close()
	if resp.Header.Get("ETag") == "" || resp2.StatusCode != http.StatusNotModified {
		t.Errorf("ETag %q, revalidation %s", resp.Header.Get("ETag"), resp2.Status)
	}
}

func TestRunServesAndShutsDown(t *testing.T) {
	s, err := New(Options{Listen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	addr := s.Addr()
	if addr == "" || strings.HasSuffix(addr, ":0") {
		t.Fatalf("Addr = %q", addr)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Run(ctx) }()

	// Run needs no readiness signal: the listener is already bound.
	resp, body := get(t, "http://"+addr+"/healthz")
	if resp.StatusCode != 503 || !strings.Contains(body, "no health report") {
		t.Errorf("healthz before any report: %s %q", resp.Status, body)
	}
	sctx, scancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer scancel()
	st := openStream(t, sctx, "http://"+addr+"/api/events")
	st.until(t, "health")

	// Shutting down ends the open stream and Run returns nil.
	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Errorf("Run: %v", err)
		}
	case <-sctx.Done():
		t.Fatal("Run did not return after cancel")
	}
	if _, err := st.next(); err == nil {
		t.Errorf("stream still open after shutdown")
	}

	// A Server without a listener cannot Run; a taken port fails in New.
	s2, err := New(Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := s2.Run(context.Background()); err == nil {
		t.Errorf("Run without Listen: no error")
	}
	s3, err := New(Options{Listen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	defer s3.Close()
	if _, err := New(Options{Listen: s3.Addr()}); err == nil || !strings.Contains(err.Error(), s3.Addr()) {
		t.Errorf("New on a taken port: %v", err)
	}
}

func TestNewErrors(t *testing.T) {
	s, _ := startServer(t, Options{})
	// One registry takes one status collector.
	if _, err := New(Options{Registry: s.registry}); err == nil {
		t.Errorf("second Server on one registry: no error")
	}
	if _, err := New(Options{Listen: "not an address"}); err == nil {
		t.Errorf("bad Listen: no error")
	}
}

func TestFeedingOddInput(t *testing.T) {
	s, ts := startServer(t, Options{})
	s.Reading(nil)
	s.Reading(&mqtt.Reading{})
	// No temperature, unknown unit, NaN and Inf values, no time: stored, no glow.
	nan := 0.0
	nan = nan / nan
	s.Reading(&mqtt.Reading{Head: "odd", Unit: "furlongs", Temperature: f64(1000), RawTemperature: &nan,
		Channels: []mqtt.Channel{{Name: "a", SignalFraction: &nan}}})
	s.SetHeads([]HeadInfo{{Name: ""}, {Name: "dup"}, {Name: "dup"}, {Name: "bad-map", Settings: map[string]any{"x": nan}}, {Name: "odd"}})
	_, body := get(t, ts.URL+"/api/state")
	var state struct {
		Heads []struct {
			Name     string         `json:"name"`
			Settings map[string]any `json:"settings"`
		} `json:"heads"`
		Readings []eventReading `json:"readings"`
	}
	if err := json.Unmarshal([]byte(body), &state); err != nil {
		t.Fatalf("state: %v\n%s", err, body)
	}
	if len(state.Heads) != 3 || state.Heads[1].Name != "bad-map" || state.Heads[1].Settings["error"] == nil {
		t.Errorf("heads = %+v", state.Heads)
	}
	if len(state.Readings) != 1 || state.Readings[0].Glow != nil {
		t.Errorf("readings = %+v", state.Readings)
	}
	// Below the Draper point (about 525 °C) nothing glows visibly: no swatch.
	s.Reading(testReading("odd", 2, t0, 400, "degC", demoChannels[0], 0.5, "good"))
	_, body = get(t, ts.URL+"/api/state")
	if !strings.Contains(body, `"glow":null`) {
		t.Errorf("400 °C reading has a glow colour: %s", body)
	}
	s.Reading(testReading("odd", 3, t0, 800, "K", demoChannels[0], 0.5, "good"))
	_, body = get(t, ts.URL+"/api/state")
	if !strings.Contains(body, `"glow":"#ff0000"`) {
		t.Errorf("800 K reading: want the pure red of a faint glow: %s", body)
	}
	if resp, _ := get(t, ts.URL+"/metrics"); resp.StatusCode != 200 {
		t.Errorf("metrics: %s", resp.Status)
	}
	// Alarms with odd times encode.
	s.SetAlarms([]AlarmView{{Head: "odd", Name: "a", Since: time.Date(20000, 1, 1, 0, 0, 0, 0, time.UTC)}})
	if _, body := get(t, ts.URL+"/api/state"); !strings.Contains(body, `"since":null`) {
		t.Errorf("alarm with year 20000: %s", body)
	}
}
