package status

import (
	"context"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"glowgate/bus/modbus"
	"glowgate/internal/realtest"
)

// The browser tests drive Debian's Chromium (package chromium) headless
// through the DevTools protocol with chromedp. Without a Chromium they
// skip, unless GLOWGATE_REQUIRE_REAL=1, when they fail.

// screenshotDir receives the page's screenshots for people to look at.
const screenshotDir = "testdata/screenshots"

func chromiumPath(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	realtest.Missing(t, "no Chromium installed (Debian package chromium)")
	return ""
}

// newBrowser starts a headless Chromium with a fresh profile and returns a
// tab's context; console errors and uncaught exceptions go to *problems.
func newBrowser(t *testing.T, problems *[]string, mu *sync.Mutex) context.Context {
	t.Helper()
	opts := []chromedp.ExecAllocatorOption{
		chromedp.ExecPath(chromiumPath(t)),
		chromedp.Headless,
		chromedp.NoSandbox,
		chromedp.DisableGPU,
		chromedp.NoFirstRun,
		chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.Flag("disable-dev-shm-usage", true),
		chromedp.Flag("disable-extensions", true),
		chromedp.Flag("hide-scrollbars", true),
		chromedp.Flag("force-color-profile", "srgb"),
		chromedp.UserDataDir(t.TempDir()),
		chromedp.WindowSize(1280, 800),
	}
	actx, acancel := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancel := chromedp.NewContext(actx)
	tctx, tcancel := context.WithTimeout(ctx, 90*time.Second)
	var wg sync.WaitGroup
	t.Cleanup(func() {
		tcancel()
		cancel()
		acancel()
		wg.Wait()
	})
	if err := chromedp.Do(tctx); err != nil { // starts the browser
		t.Fatalf("start Chromium: %v", err)
	}
	msgs := chromedp.Console(tctx)
	wg.Add(1)
	go func() {
		defer wg.Done()
		for m, err := range msgs {
			if err != nil {
				return
			}
			if m.IsException() || m.Type == "error" {
				mu.Lock()
				*problems = append(*problems, fmt.Sprintf("%s: %s (%s:%d)", m.Type, m.Text, m.URL, m.Line+1))
				mu.Unlock()
			}
		}
	}()
	return tctx
}

// alarmModel is the test's stand-in for the daemon's alarms: operator
// actions change it and it feeds the Server.
type alarmModel struct {
	mu     sync.Mutex
	s      *Server
	alarms []AlarmView
	acts   []Action
}

func (m *alarmModel) act(_ context.Context, a Action) error {
	m.mu.Lock()
	defer m.mu.Unlock()
	m.acts = append(m.acts, a)
	for i := range m.alarms {
		al := &m.alarms[i]
		if al.Head != a.Head || al.Name != a.Alarm {
			continue
		}
		switch a.Kind {
		case ActionAcknowledge:
			al.State = AlarmAcknowledged
		case ActionShelve:
			al.ShelvedUntil = a.Until
		case ActionUnshelve:
			al.ShelvedUntil = time.Time{}
		}
		m.s.SetAlarms(m.alarms)
		return nil
	}
	return fmt.Errorf("no alarm %s on %s", a.Alarm, a.Head)
}

func (m *alarmModel) actions() []Action {
	m.mu.Lock()
	defer m.mu.Unlock()
	return append([]Action(nil), m.acts...)
}

// evilDescription would run script if the page wrote it as HTML.
const evilDescription = `<img src=x onerror="window.__pwned=1"><script>window.__pwned=2</script>Firing zone`

// feedHeads fills a quarter hour of history, then feeds the three test
// heads every 100 ms with changing values until ctx ends.
func feedHeads(ctx context.Context, s *Server, wg *sync.WaitGroup) {
	seq := uint64(0)
	feed := func(at time.Time) {
		x := float64(at.UnixMilli()) / 1000
		seq++
		s.Reading(testReading("caster-strand", seq, at, 1150+12*math.Sin(x/40)+0.7*math.Sin(x*1.3), "degC", demoChannels[0], 0.74+0.03*math.Sin(x/9), "good"))
		seq++
		lr := testReading("ladle-stream", seq, at, 1590+6*math.Sin(x/25)+0.4*math.Sin(x*2.1), "degC", demoChannels[0], 0.12+0.02*math.Sin(x/7), "uncertain")
		lr.Flags = []string{"low_signal"}
		s.Reading(lr)
		seq++
		s.Reading(testReading("kiln-zone", seq, at, 1480+3*math.Sin(x/60)+0.3*math.Sin(x*0.9), "K", demoChannels[1], 0.62+0.02*math.Sin(x/11), "good"))
	}
	now := time.Now()
	for at := now.Add(-15 * time.Minute); at.Before(now); at = at.Add(time.Second) {
		feed(at)
	}
	wg.Add(1)
	go func() {
		defer wg.Done()
		tick := time.NewTicker(100 * time.Millisecond)
		defer tick.Stop()
		for {
			select {
			case <-ctx.Done():
				return
			case at := <-tick.C:
				feed(at)
			}
		}
	}()
}

func browserHeads() []HeadInfo {
	infos := headInfos()
	infos[2].Description = evilDescription
	return infos
}

func TestBrowserPage(t *testing.T) {
	model := &alarmModel{}
	s, ts := startServer(t, Options{Token: testToken, Act: model.act, Gateway: "brackwater-gw1", Version: "v0.9.0"})
	model.s = s
	s.SetHeads(browserHeads())
	now := time.Now()
	model.alarms = []AlarmView{
		{Head: "caster-strand", Name: "over-temperature", State: AlarmUnacknowledged, Priority: "high", Message: "above 1160 °C for 10 s", Since: now.Add(-3 * time.Minute)},
		{Head: "kiln-zone", Name: "nongrey", State: AlarmUnacknowledged, Priority: "medium", Message: "pair temperatures spread 2.5 K", Since: now.Add(-8 * time.Minute)},
		{Head: "ladle-stream", Name: "low-signal", State: AlarmAcknowledged, Priority: "low", Message: "signal fraction below 20 %", Since: now.Add(-20 * time.Minute)},
	}
	s.SetAlarms(model.alarms)
	s.SetHealth(Health{BrokerConnected: true, Broker: "127.0.0.1:1883", OutboxDepth: 2, Published: 48210})
	s.SetLineStats(func() []modbus.LineStats { return lineStats(false) })

	fctx, fcancel := context.WithCancel(context.Background())
	var fwg sync.WaitGroup
	t.Cleanup(func() { fcancel(); fwg.Wait() })
	feedHeads(fctx, s, &fwg)

	var pmu sync.Mutex
	var problems []string
	ctx := newBrowser(t, &problems, &pmu)
	if err := os.MkdirAll(screenshotDir, 0o755); err != nil {
		t.Fatal(err)
	}
	shot := func(name string) {
		t.Helper()
		capture := chromedp.CaptureScreenshot()
		if strings.Contains(name, "-full") {
			capture = chromedp.FullScreenshot(100) // the whole page, PNG
		}
		buf, err := chromedp.Run(ctx, capture)
		if err != nil {
			t.Fatalf("screenshot %s: %v", name, err)
		}
		if err := os.WriteFile(filepath.Join(screenshotDir, name), buf, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	do := func(what string, steps ...chromedp.Action[chromedp.Void]) {
		t.Helper()
		if err := chromedp.Do(ctx, steps...); err != nil {
			t.Fatalf("%s: %v", what, err)
		}
	}
	eval := func(expr string) string {
		t.Helper()
		v, err := chromedp.Run(ctx, chromedp.Evaluate[string](expr))
		if err != nil {
			t.Fatalf("evaluate %s: %v", expr, err)
		}
		return v
	}
	wait := func(what, cond string) {
		t.Helper()
		if _, err := chromedp.Run(ctx, chromedp.Poll[chromedp.Void](cond, chromedp.WithPollingInterval(50*time.Millisecond), chromedp.WithPollingTimeout(20*time.Second))); err != nil {
			page, _ := chromedp.Run(ctx, chromedp.Evaluate[string](`document.body.innerText.slice(0, 2000)`))
			t.Fatalf("waiting for %s (%s): %v\npage text:\n%s", what, cond, err, page)
		}
	}

	do("open the page", chromedp.EmulateViewport(1280, 800), chromedp.Navigate(ts.URL+"/"))

	// A tile for every head, live values.
	wait("three tiles", `document.querySelectorAll(".tile").length === 3`)
	wait("live stream", `document.getElementById("live").textContent === "live"`)
	tempSel := `document.querySelector('.tile[data-head="caster-strand"] .temp').textContent`
	wait("a temperature", tempSel+` !== "—"`)
	first := eval(tempSel)
	wait("the temperature to change", tempSel+` !== `+fmt.Sprintf("%q", first))
	if unit := eval(`document.querySelector('.tile[data-head="kiln-zone"] .unit').textContent`); unit != "K" {
		t.Errorf("kiln-zone unit %q, want K", unit)
	}
	if u := eval(`document.querySelector('.tile[data-head="caster-strand"] .unit').textContent`); u != "°C" {
		t.Errorf("caster-strand unit %q, want °C", u)
	}
	if bg := eval(`getComputedStyle(document.querySelector('.tile[data-head="caster-strand"] .swatch')).backgroundColor`); !strings.HasPrefix(bg, "rgb(255,") {
		t.Errorf("glow swatch of ~1150 °C = %s, want a red-orange rgb(255, …)", bg)
	}
	wait("sparklines drawn", `(() => { const c = document.querySelector('.tile[data-head="kiln-zone"] canvas.spark');
		const d = c.getContext("2d").getImageData(0, 0, c.width, c.height).data; let n = 0;
		for (let i = 3; i < d.length; i += 4) if (d[i]) n++; return n > 50; })()`)

	// Configuration text shown as text, never run.
	if d := eval(`document.querySelector('.tile[data-head="kiln-zone"] .tile-desc').textContent`); d != evilDescription {
		t.Errorf("description shown as %q, want the literal text", d)
	}
	if v := eval(`String(window.__pwned) + "/" + document.querySelectorAll("main img, main script").length`); v != "undefined/0" {
		t.Errorf("configuration text ran or made elements: %s", v)
	}

	// Not signed in: no action buttons.
	wait("the alarm list", `document.querySelectorAll("#alarms li").length === 3`)
	if n := eval(`String(document.querySelectorAll("#alarms button, #alarms select").length)`); n != "0" {
		t.Errorf("%s action controls before signing in", n)
	}
	if hidden := eval(`String(document.getElementById("login").hidden)`); hidden != "false" {
		t.Errorf("login form hidden on a page with actions")
	}
	shot("overview-1280x800.png")

	// A wrong token is refused.
	do("wrong token", chromedp.SendKeys(chromedp.ID("op-token"), "not-the-token"), chromedp.Click(chromedp.CSS(`#login button[type="submit"]`)))
	wait("refusal", `document.getElementById("login-msg").textContent === "token refused" && document.getElementById("op-token").value === ""`)
	if n := eval(`String(document.querySelectorAll("#alarms button").length)`); n != "0" {
		t.Errorf("buttons after a refused token")
	}

	// Sign in, acknowledge, shelve.
	do("sign in",
		chromedp.SendKeys(chromedp.ID("op-name"), "Jo"),
		chromedp.SendKeys(chromedp.ID("op-token"), testToken),
		chromedp.Click(chromedp.CSS(`#login button[type="submit"]`)))
	wait("signed in", `!document.getElementById("session").hidden && document.querySelectorAll("#alarms button.ack").length === 2`)
	shot("overview-operator-1280x800.png")
	do("acknowledge", chromedp.Click(chromedp.CSS(`#alarms li[data-alarm="over-temperature"] button.ack`)))
	wait("acknowledged", `document.querySelector('#alarms li[data-alarm="over-temperature"]').classList.contains("acknowledged") &&
		!document.querySelector('#alarms li[data-alarm="over-temperature"] button.ack')`)
	do("shelve", chromedp.Click(chromedp.CSS(`#alarms li[data-alarm="nongrey"] button.shelve`)))
	wait("shelved alarm leaves the list", `!document.querySelector('#alarms li[data-alarm="nongrey"]') &&
		!!document.querySelector('#shelved li[data-alarm="nongrey"]')`)
	acts := model.actions()
	if len(acts) != 2 || acts[0].Kind != ActionAcknowledge || acts[0].By != "Jo" || acts[1].Kind != ActionShelve ||
		time.Until(acts[1].Until) < 14*time.Minute || time.Until(acts[1].Until) > 16*time.Minute {
		t.Errorf("actions = %+v, want acknowledge by Jo, then shelve for 15 min", acts)
	}
	// The tile's alarm badges follow: kiln-zone's medium alarm is shelved.
	wait("tile badges", `document.querySelector('.tile[data-head="kiln-zone"] .tile-alarms').childElementCount === 0 &&
		document.querySelector('.tile[data-head="caster-strand"] .tile-alarms').textContent === "1 high"`)

	// Head detail: trends, spectrum, settings.
	do("open detail", chromedp.Navigate(ts.URL+"/#/head/kiln-zone"))
	painted := func(id string) string {
		return `(() => { const c = document.getElementById("` + id + `");
			const d = c.getContext("2d").getImageData(0, 0, c.width, c.height).data; let n = 0;
			for (let i = 3; i < d.length; i += 4) if (d[i]) n++; return n; })()`
	}
	wait("detail shown", `!document.getElementById("detail").hidden && document.getElementById("d-name").textContent === "kiln-zone"`)
	wait("spectrum drawn", painted("d-spectrum")+` > 2000`)
	wait("trend drawn", painted("d-trend")+` > 2000 && `+painted("d-frac")+` > 2000`)
	wait("pair temperatures", `document.querySelectorAll("#d-pairs tbody tr").length === 3`)
	if n := eval(`String(document.querySelectorAll("#d-channels tbody tr").length)`); n != "3" {
		t.Errorf("%s channel rows, want 3", n)
	}
	if d := eval(`document.getElementById("d-desc").textContent`); d != evilDescription {
		t.Errorf("detail description %q", d)
	}
	shot("detail-1280x800.png")
	shot("detail-1280-full.png")
	do("caster detail", chromedp.Navigate(ts.URL+"/#/head/caster-strand"))
	wait("caster settings", `document.getElementById("d-name").textContent === "caster-strand" && document.querySelectorAll("#d-settings tbody tr").length === 2`)
	if v := eval(`document.querySelector("#d-settings tbody tr:nth-child(2) td:last-child").textContent`); v != `{"decay_K_per_s":30,"hold":"peak"}` {
		t.Errorf("nested setting shown as %q", v)
	}

	// Phone width: nothing wider than the screen.
	do("phone", chromedp.EmulateViewport(390, 844, chromedp.EmulateMobile, chromedp.EmulateTouch), chromedp.Navigate(ts.URL+"/#/"))
	wait("tiles on the phone", `document.querySelectorAll(".tile").length === 3 && document.getElementById("live").textContent === "live"`)
	wait("painted", `document.querySelector('.tile[data-head="caster-strand"] .temp').textContent !== "—"`)
	if w := eval(`String(document.documentElement.scrollWidth)`); w != "390" {
		t.Errorf("page %s px wide at 390 px", w)
	}
	shot("overview-390x844.png")
	do("phone detail", chromedp.Navigate(ts.URL+"/#/head/kiln-zone"))
	wait("spectrum on the phone", `document.getElementById("d-name").textContent === "kiln-zone" && `+painted("d-spectrum")+` > 1000`)
	if w := eval(`String(document.documentElement.scrollWidth)`); w != "390" {
		t.Errorf("detail %s px wide at 390 px", w)
	}
	shot("detail-390x844.png")
	shot("detail-390-full.png")

	// Signing out removes the buttons again.
	do("back", chromedp.EmulateViewport(1280, 800), chromedp.Navigate(ts.URL+"/#/"))
	wait("signed in after reload (session storage)", `!document.getElementById("session").hidden`)
	do("sign out", chromedp.Click(chromedp.ID("logout")))
	wait("buttons gone", `document.querySelectorAll("#alarms button").length === 0 && !document.getElementById("login").hidden`)

	pmu.Lock()
	defer pmu.Unlock()
	for _, p := range problems {
		if strings.Contains(p, "api/session") || strings.Contains(p, "403") {
			continue // the refused token above logs its 403
		}
		t.Errorf("browser console: %s", p)
	}
}

func TestBrowserReadOnly(t *testing.T) {
	s, ts := startServer(t, Options{Gateway: "ro-gw"}) // no token: read-only
	s.SetHeads(headInfos())
	s.SetAlarms([]AlarmView{{Head: "caster-strand", Name: "over-temperature", State: AlarmUnacknowledged, Priority: "high", Since: time.Now()}})
	s.SetHealth(Health{BrokerConnected: false})
	s.Reading(testReading("caster-strand", 1, time.Now(), 1150, "degC", demoChannels[0], 0.75, "good"))
	var pmu sync.Mutex
	var problems []string
	ctx := newBrowser(t, &problems, &pmu)
	if err := chromedp.Do(ctx, chromedp.Navigate(ts.URL+"/")); err != nil {
		t.Fatal(err)
	}
	cond := `document.querySelectorAll("#alarms li").length === 1 && document.getElementById("broker").textContent === "broker down"`
	if _, err := chromedp.Run(ctx, chromedp.Poll[chromedp.Void](cond, chromedp.WithPollingTimeout(20*time.Second))); err != nil {
		t.Fatalf("page did not load: %v", err)
	}
	v, err := chromedp.Run(ctx, chromedp.Evaluate[string](`document.getElementById("login").hidden + "/" + document.querySelectorAll("#alarms button").length + "/" + document.getElementById("health-status").textContent`))
	if err != nil {
		t.Fatal(err)
	}
	if v != "true/0/Degraded" {
		t.Errorf("read-only page: login hidden/buttons/health = %s, want true/0/Degraded", v)
	}
	pmu.Lock()
	defer pmu.Unlock()
	for _, p := range problems {
		t.Errorf("browser console: %s", p)
	}
}
