package status

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"net/http"
	"strings"
	"sync"
	"testing"
	"time"

	"glowgate/bus/modbus"
)

func TestHealthz(t *testing.T) {
	clk := &testClock{t: t0}
	s, ts := startServer(t, Options{Now: clk.Now, MaxOutboxAge: time.Minute})
	check := func(wantCode int, wantParts ...string) {
		t.Helper()
		resp, body := get(t, ts.URL+"/healthz")
		if resp.StatusCode != wantCode {
			t.Errorf("healthz: %s %q, want %d", resp.Status, body, wantCode)
		}
		if wantCode == 200 && body != "ok\n" {
			t.Errorf("healthz body %q, want \"ok\\n\"", body)
		}
		if wantCode == 503 && !strings.HasPrefix(body, "degraded: ") {
			t.Errorf("healthz body %q, want \"degraded: …\"", body)
		}
		for _, p := range wantParts {
			if !strings.Contains(body, p) {
				t.Errorf("healthz body %q lacks %q", body, p)
			}
		}
	}
	check(503, "no health report")
	s.SetHealth(Health{BrokerConnected: true})
	check(200)
	s.SetHealth(Health{BrokerConnected: false, OutboxDepth: 10, OutboxOldest: 90 * time.Second})
	check(503, "broker disconnected", "oldest unpublished message is 1m30s old (limit 1m0s)")
	s.SetHealth(Health{BrokerConnected: true, OutboxOldest: 30 * time.Second, Degraded: []string{"configuration reload failed", " "}})
	check(503, "configuration reload failed")
	s.SetHealth(Health{BrokerConnected: true})
	s.SetLineStats(func() []modbus.LineStats { return lineStats(false) })
	check(200)
	s.SetLineStats(func() []modbus.LineStats { return lineStats(true) })
	check(503, "line kiln-bus: every head failing")
	if resp, body := get(t, ts.URL+"/healthz"); strings.Contains(body, "melt-shop") {
		t.Errorf("healthy line named: %s %q", resp.Status, body)
	}

	// The page's health object says the same, with the lines' figures.
	_, body := get(t, ts.URL+"/api/state")
	var state struct {
		Health struct {
			Status  string   `json:"status"`
			Reasons []string `json:"reasons"`
			Lines   []struct {
				Name      string  `json:"name"`
				Heads     int     `json:"heads"`
				Failing   int     `json:"failing"`
				PollsPerS float64 `json:"polls_per_s"`
				MeanMS    float64 `json:"mean_ms"`
				Busy      float64 `json:"busy"`
			} `json:"lines"`
		} `json:"health"`
	}
	if err := json.Unmarshal([]byte(body), &state); err != nil {
		t.Fatal(err)
	}
	h := state.Health
	if h.Status != "degraded" || len(h.Reasons) != 1 || len(h.Lines) != 2 {
		t.Fatalf("health = %+v", h)
	}
	// melt-shop: 200 polls in 10 s, 200 transactions of 4 ms.
	if l := h.Lines[0]; l.Name != "melt-shop" || l.Heads != 2 || l.Failing != 0 || !near(l.PollsPerS, 20, 1e-6) || !near(l.MeanMS, 4, 1e-6) || !near(l.Busy, 0.08, 1e-6) {
		t.Errorf("melt-shop health = %+v", l)
	}
	if l := h.Lines[1]; l.Failing != 1 || l.Heads != 1 {
		t.Errorf("kiln-bus health = %+v", l)
	}
}

// actionServer starts a server with the token whose Act records the
// actions and answers with actErr.
func actionServer(t *testing.T, actErr error) (*Server, string, func() []Action, *testClock) {
	var mu sync.Mutex
	var got []Action
	clk := &testClock{t: t0}
	s, ts := startServer(t, Options{Token: testToken, Now: clk.Now, Act: func(ctx context.Context, a Action) error {
		if _, ok := ctx.Deadline(); !ok {
			t.Errorf("Act without a deadline")
		}
		mu.Lock()
		defer mu.Unlock()
		got = append(got, a)
		return actErr
	}})
	s.SetAlarms([]AlarmView{
		{Head: "caster-strand", Name: "over-temperature", State: AlarmUnacknowledged, Priority: "high", Message: "above 1200 °C", Since: t0},
	})
	return s, ts.URL, func() []Action {
		mu.Lock()
		defer mu.Unlock()
		return append([]Action(nil), got...)
	}, clk
}

func post(t *testing.T, url, token, ctype, body string, hdr ...string) (int, string, http.Header) {
	t.Helper()
	req, err := http.NewRequest("POST", url, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	for i := 0; i+1 < len(hdr); i += 2 {
		req.Header.Set(hdr[i], hdr[i+1])
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatalf("POST %s: %v", url, err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b), resp.Header
}

const ackBody = `{"kind":"acknowledge","head":"caster-strand","alarm":"over-temperature","by":"Jo"}`

func TestActionNeedsToken(t *testing.T) {
	_, url, acts, _ := actionServer(t, nil)
	code, _, hdr := post(t, url+"/api/action", "", "application/json", ackBody)
	if code != http.StatusUnauthorized || !strings.HasPrefix(hdr.Get("WWW-Authenticate"), "Bearer") {
		t.Errorf("no token: %d, WWW-Authenticate %q; want 401 Bearer", code, hdr.Get("WWW-Authenticate"))
	}
	if code, _, _ := post(t, url+"/api/action", "wrong-token", "application/json", ackBody); code != http.StatusForbidden {
		t.Errorf("wrong token: %d, want 403", code)
	}
	if code, _, _ := post(t, url+"/api/action", testToken+"x", "application/json", ackBody); code != http.StatusForbidden {
		t.Errorf("token with a suffix: %d, want 403", code)
	}
	if code, _, _ := post(t, url+"/api/action", "", "application/json", ackBody, "Authorization", "Basic "+testToken); code != http.StatusUnauthorized {
		t.Errorf("token in another scheme: %d, want 401", code)
	}
	// Another site may not act even with the token (a browser marks it).
	if code, _, _ := post(t, url+"/api/action", testToken, "application/json", ackBody, "Sec-Fetch-Site", "cross-site"); code != http.StatusForbidden {
		t.Errorf("cross-site: %d, want 403", code)
	}
	if code, _, _ := post(t, url+"/api/action", testToken, "application/json", ackBody, "Origin", "http://evil.example"); code != http.StatusForbidden {
		t.Errorf("foreign Origin: %d, want 403", code)
	}
	if n := len(acts()); n != 0 {
		t.Fatalf("Act called %d times without a valid request", n)
	}
	// The session check says the same, and changes nothing.
	if code, _, _ := post(t, url+"/api/session", "", "", ""); code != http.StatusUnauthorized {
		t.Errorf("session without token: %d", code)
	}
	if code, _, _ := post(t, url+"/api/session", "nope", "", ""); code != http.StatusForbidden {
		t.Errorf("session with a wrong token: %d", code)
	}
	if code, _, _ := post(t, url+"/api/session", testToken, "", ""); code != http.StatusNoContent {
		t.Errorf("session with the token: %d, want 204", code)
	}
	if n := len(acts()); n != 0 {
		t.Fatalf("session check called Act")
	}
}

func TestActionCallsAct(t *testing.T) {
	_, url, acts, clk := actionServer(t, nil)
	code, body, _ := post(t, url+"/api/action", testToken, "application/json", ackBody, "Origin", url, "Sec-Fetch-Site", "same-origin")
	if code != 200 || body != `{"ok":true}` {
		t.Fatalf("acknowledge: %d %q", code, body)
	}
	clk.Set(t0.Add(time.Minute))
	code, body, _ = post(t, url+"/api/action", testToken, "application/json; charset=utf-8",
		`{"kind":"shelve","head":"caster-strand","alarm":"over-temperature","minutes":60}`)
	if code != 200 {
		t.Fatalf("shelve: %d %q", code, body)
	}
	code, _, _ = post(t, url+"/api/action", testToken, "application/json", `{"kind":"unshelve","head":"caster-strand","alarm":"over-temperature"}`)
	if code != 200 {
		t.Fatalf("unshelve: %d", code)
	}
	got := acts()
	want := []Action{
		{Kind: ActionAcknowledge, Head: "caster-strand", Alarm: "over-temperature", By: "Jo"},
		{Kind: ActionShelve, Head: "caster-strand", Alarm: "over-temperature", By: "operator", Until: t0.Add(61 * time.Minute)},
		{Kind: ActionUnshelve, Head: "caster-strand", Alarm: "over-temperature", By: "operator"},
	}
	if len(got) != len(want) {
		t.Fatalf("Act got %+v", got)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("action %d = %+v, want %+v", i, got[i], want[i])
		}
	}
}

func TestActionRejects(t *testing.T) {
	_, url, acts, _ := actionServer(t, nil)
	cases := []struct {
		name, ctype, body string
		code              int
	}{
		{"form post", "application/x-www-form-urlencoded", "kind=acknowledge", 415},
		{"no content type", "", ackBody, 415},
		{"not JSON", "application/json", "{", 400},
		{"unknown field", "application/json", `{"kind":"acknowledge","head":"caster-strand","alarm":"over-temperature","admin":true}`, 400},
		{"unknown kind", "application/json", `{"kind":"delete","head":"caster-strand","alarm":"over-temperature"}`, 400},
		{"no head", "application/json", `{"kind":"acknowledge","alarm":"over-temperature"}`, 400},
		{"unknown alarm", "application/json", `{"kind":"acknowledge","head":"caster-strand","alarm":"nope"}`, 404},
		{"shelve for 0", "application/json", `{"kind":"shelve","head":"caster-strand","alarm":"over-temperature"}`, 400},
		{"shelve too long", "application/json", `{"kind":"shelve","head":"caster-strand","alarm":"over-temperature","minutes":1441}`, 400},
		{"minutes on ack", "application/json", `{"kind":"acknowledge","head":"caster-strand","alarm":"over-temperature","minutes":5}`, 400},
		{"name with control", "application/json", `{"kind":"acknowledge","head":"caster-strand","alarm":"over-temperature","by":"a\u0007b"}`, 400},
		{"name too long", "application/json", `{"kind":"acknowledge","head":"caster-strand","alarm":"over-temperature","by":"` + strings.Repeat("x", 65) + `"}`, 400},
		{"huge body", "application/json", `{"kind":"acknowledge","by":"` + strings.Repeat("x", 5000) + `"}`, 400},
	}
	for _, c := range cases {
		if code, body, _ := post(t, url+"/api/action", testToken, c.ctype, c.body); code != c.code {
			t.Errorf("%s: %d %q, want %d", c.name, code, body, c.code)
		}
	}
	if n := len(acts()); n != 0 {
		t.Errorf("Act called %d times for rejected requests", n)
	}
}

func TestActionError(t *testing.T) {
	_, url, acts, _ := actionServer(t, errors.New("alarm is not shelvable"))
	code, body, _ := post(t, url+"/api/action", testToken, "application/json", ackBody)
	if code != http.StatusConflict || !strings.Contains(body, "alarm is not shelvable") || len(acts()) != 1 {
		t.Errorf("Act error: %d %q", code, body)
	}
}

func TestReadOnly(t *testing.T) {
	called := false
	act := func(context.Context, Action) error { called = true; return nil }
	for _, o := range []Options{{Act: act}, {Token: testToken}} {
		s, ts := startServer(t, o)
		s.SetAlarms([]AlarmView{{Head: "caster-strand", Name: "over-temperature", State: AlarmUnacknowledged}})
		for _, tok := range []string{"", testToken} {
			if code, _, _ := post(t, ts.URL+"/api/action", tok, "application/json", ackBody); code != http.StatusForbidden {
				t.Errorf("read-only server (token %v, act %v): %d, want 403", o.Token != "", o.Act != nil, code)
			}
		}
		_, body := get(t, ts.URL+"/api/state")
		if !strings.Contains(body, `"actions":false`) {
			t.Errorf("read-only state: %.200s", body)
		}
	}
	if called {
		t.Errorf("Act called on a read-only server")
	}
}

func TestGetChangesNothing(t *testing.T) {
	s, url, acts, _ := actionServer(t, nil)
	s.SetHeads(headInfos())
	s.Reading(testReading("caster-strand", 1, t0, 1150, "degC", demoChannels[0], 0.75, "good"))
	_, before := get(t, url+"/api/state")
	paths := []string{
		"/api/action", "/api/action?kind=acknowledge&head=caster-strand&alarm=over-temperature", "/api/session",
		"/", "/api/state", "/api/history", "/api/history?head=caster-strand", "/metrics", "/healthz",
	}
	for _, p := range paths {
		req, _ := http.NewRequest("GET", url+p, nil)
		req.Header.Set("Authorization", "Bearer "+testToken)
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if strings.HasPrefix(p, "/api/action") || p == "/api/session" {
			if resp.StatusCode != http.StatusMethodNotAllowed || !strings.Contains(resp.Header.Get("Allow"), "POST") {
				t.Errorf("GET %s: %s (Allow %q), want 405", p, resp.Status, resp.Header.Get("Allow"))
			}
		}
	}
	if n := len(acts()); n != 0 {
		t.Errorf("GET called Act %d times", n)
	}
	_, after := get(t, url+"/api/state")
	strip := func(s string) string { // the "now" field changes with the clock only
		i := strings.Index(s, `"now":`)
		j := strings.Index(s, `,"seq":`)
		return s[:i] + s[j:]
	}
	if strip(before) != strip(after) {
		t.Errorf("state changed by GETs:\n%s\n%s", before, after)
	}
}
