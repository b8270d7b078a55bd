package daemon

import (
	"context"
	"fmt"
	"os"
	"os/exec"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt/mqtttest"
)

// TestStatusPageOfTheDemo drives Debian's Chromium (chromedp, headless)
// against the daemon running the demo configuration on the simulator: a
// tile for every head, and a temperature that changes while it is watched.
func TestStatusPageOfTheDemo(t *testing.T) {
	const chromium = "/usr/bin/chromium"
	if _, err := exec.LookPath(chromium); err != nil {
		modbustest.RequireReal(t, "Debian's chromium is not installed: %v", err)
	}
	broker := mqtttest.Start(t)
	cfg := demoConfig(t)
	startSimulator(t, cfg)
	d, err := New(Options{Config: cfg, Brokers: []string{broker.URL()}, HTTPListen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- d.Run(t.Context()) }()
	t.Cleanup(func() { <-done })
	var addr string
	for deadline := time.Now().Add(10 * time.Second); addr == "" && time.Now().Before(deadline); {
		addr = d.StatusAddr()
	}
	if addr == "" {
		t.Fatal("no status page")
	}

	actx, acancel := chromedp.NewExecAllocator(context.Background(),
		chromedp.ExecPath(chromium), chromedp.Headless, chromedp.NoSandbox, chromedp.DisableGPU,
		chromedp.NoFirstRun, chromedp.NoDefaultBrowserCheck,
		chromedp.Flag("disable-background-networking", true),
		chromedp.Flag("disable-component-update", true),
		chromedp.Flag("disable-sync", true),
		chromedp.UserDataDir(t.TempDir()), chromedp.WindowSize(1280, 800))
	defer acancel()
	ctx, cancel := chromedp.NewContext(actx)
	defer cancel()
	ctx, stop := context.WithTimeout(ctx, 60*time.Second)
	defer stop()

	poll := func(cond string) {
		t.Helper()
		if _, err := chromedp.Run(ctx, chromedp.Poll[chromedp.Void](cond, chromedp.WithPollingTimeout(20*time.Second))); err != nil {
			t.Fatalf("waiting for %s: %v", cond, err)
		}
	}
	if _, err := chromedp.Run(ctx, chromedp.Navigate("http://"+addr+"/")); err != nil {
		t.Fatalf("open the page: %v", err)
	}
	poll(fmt.Sprintf(`document.querySelectorAll(".tile").length === %d`, len(cfg.Heads)))
	sel := `document.querySelector('.tile[data-head="ladle-stream"] .temp').textContent`
	poll(sel + ` !== "" && !isNaN(parseFloat(` + sel + `))`)
	first, err := chromedp.Run(ctx, chromedp.Evaluate[string](sel))
	if err != nil {
		t.Fatal(err)
	}
	poll(sel + ` !== ` + fmt.Sprintf("%q", first)) // the simulated stream cools and rises
	if png, err := chromedp.Run(ctx, chromedp.CaptureScreenshot()); err == nil {
		dir := "status/testdata/screenshots"
		if os.MkdirAll(dir, 0o755) == nil {
			os.WriteFile(dir+"/demo-daemon-1280x800.png", png, 0o644)
		}
	}
}
