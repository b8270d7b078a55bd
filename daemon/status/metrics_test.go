package status

import (
	"net/http"
	"sort"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil/promlint"
	dto "github.com/prometheus/client_model/go"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"

	"glowgate/bus/modbus"
)

// scrape fetches /metrics and parses it with the Prometheus text parser
// (github.com/prometheus/common/expfmt), the parser Prometheus itself uses
// for the text format.
func scrape(t *testing.T, url string) (map[string]*dto.MetricFamily, string) {
	t.Helper()
	resp, body := get(t, url+"/metrics")
	if resp.StatusCode != 200 {
		t.Fatalf("/metrics: %s\n%s", resp.Status, body)
	}
	p := expfmt.NewTextParser(model.UTF8Validation)
	fams, err := p.TextToMetricFamilies(strings.NewReader(body))
	if err != nil {
		t.Fatalf("parse /metrics: %v\n%s", err, body)
	}
	return fams, body
}

func labels(m *dto.Metric) map[string]string {
	out := map[string]string{}
	for _, l := range m.GetLabel() {
		out[l.GetName()] = l.GetValue()
	}
	return out
}

// find returns the sample of family name whose labels include want.
func find(t *testing.T, fams map[string]*dto.MetricFamily, name string, want map[string]string) *dto.Metric {
	t.Helper()
	f := fams[name]
	if f == nil {
		t.Fatalf("no family %s", name)
	}
next:
	for _, m := range f.GetMetric() {
		l := labels(m)
		for k, v := range want {
			if l[k] != v {
				continue next
			}
		}
		return m
	}
	t.Fatalf("%s: no sample with labels %v", name, want)
	return nil
}

func TestMetrics(t *testing.T) {
	clk := &testClock{t: t0.Add(time.Minute)}
	s, ts := startServer(t, Options{Now: clk.Now, Version: "v1.2.3"})
	s.SetHeads(headInfos())
	s.SetLineStats(func() []modbus.LineStats { return lineStats(true) })
	s.Reading(testReading("caster-strand", 1, t0, 1150, "degC", demoChannels[0], 0.75, "good"))
	s.Reading(testReading("caster-strand", 2, t0.Add(time.Second), 1151, "degC", demoChannels[0], 0.75, "uncertain"))
	s.Reading(testReading("kiln-zone", 3, t0, 1373.15, "K", demoChannels[1], 0.5, "good"))
	bad := testReading("ladle-stream", 4, t0, 0, "degC", demoChannels[0], 0, "bad")
	bad.Temperature, bad.RawTemperature = nil, nil
	s.Reading(bad)
	s.SetAlarms([]AlarmView{
		{Head: "caster-strand", Name: "over", State: AlarmUnacknowledged, Priority: "high"},
		{Head: "kiln-zone", Name: "low-signal", State: AlarmAcknowledged, Priority: "medium"},
		{Head: "kiln-zone", Name: "comm", State: AlarmUnacknowledged, Priority: "high", ShelvedUntil: t0.Add(time.Hour)},
		{Head: "ladle-stream", Name: "gone", State: AlarmNormal, Priority: "urgent"},
		{Head: "ladle-stream", Name: "back", State: AlarmReturnedUnacknowledged, Priority: "low"},
		{Head: "ladle-stream", Name: "held", State: AlarmLatched, Priority: "urgent"},
		{Head: "ladle-stream", Name: "aside", State: AlarmShelved, Priority: "low"},
		{Head: "ladle-stream", Name: "maint", State: AlarmOutOfService, Priority: "low"},
		{Head: "ladle-stream", Name: "plant-off", State: AlarmSuppressed, Priority: "low"},
	})
	s.SetHealth(Health{BrokerConnected: true, OutboxDepth: 7, OutboxOldest: 1500 * time.Millisecond, OutboxDropped: 3, Published: 1234})

	fams, body := scrape(t, ts.URL)

	// Types, as Prometheus practice names them: _total counters, base units.
	types := map[string]dto.MetricType{
		"glowgate_temperature_celsius":     dto.MetricType_GAUGE,
		"glowgate_signal_fraction_ratio":   dto.MetricType_GAUGE,
		"glowgate_readings_total":          dto.MetricType_COUNTER,
		"glowgate_polls_total":             dto.MetricType_COUNTER,
		"glowgate_poll_errors_total":       dto.MetricType_COUNTER,
		"glowgate_transaction_seconds":     dto.MetricType_HISTOGRAM,
		"glowgate_line_busy_seconds_total": dto.MetricType_COUNTER,
		"glowgate_outbox_depth":            dto.MetricType_GAUGE,
		"glowgate_outbox_oldest_seconds":   dto.MetricType_GAUGE,
		"glowgate_outbox_dropped_total":    dto.MetricType_COUNTER,
		"glowgate_published_total":         dto.MetricType_COUNTER,
		"glowgate_broker_connected":        dto.MetricType_GAUGE,
		"glowgate_alarms_active":           dto.MetricType_GAUGE,
		"glowgate_build_info":              dto.MetricType_GAUGE,
	}
	labelSets := map[string]string{
		"glowgate_temperature_celsius":     "head",
		"glowgate_signal_fraction_ratio":   "channel,head",
		"glowgate_readings_total":          "head,quality",
		"glowgate_polls_total":             "head,line",
		"glowgate_poll_errors_total":       "head,kind,line",
		"glowgate_transaction_seconds":     "line",
		"glowgate_line_busy_seconds_total": "line",
		"glowgate_alarms_active":           "priority",
		"glowgate_build_info":              "version",
	}
	for name, typ := range types {
		f := fams[name]
		if f == nil {
			t.Errorf("family %s missing", name)
			continue
		}
		if f.GetType() != typ {
			t.Errorf("%s: type %v, want %v", name, f.GetType(), typ)
		}
		for _, m := range f.GetMetric() {
			var keys []string
			for k := range labels(m) {
				keys = append(keys, k)
			}
			sort.Strings(keys)
			if got := strings.Join(keys, ","); got != labelSets[name] {
				t.Errorf("%s: labels %q, want %q", name, got, labelSets[name])
			}
		}
	}
	for name := range fams {
		if _, ok := types[name]; strings.HasPrefix(name, "glowgate_") && !ok {
			t.Errorf("unexpected family %s", name)
		}
	}

	// Naming checked by Prometheus's own linter (client_golang promlint).
	problems, err := promlint.New(strings.NewReader(body)).Lint()
	if err != nil {
		t.Fatalf("promlint: %v", err)
	}
	for _, p := range problems {
		if strings.HasPrefix(p.Metric, "glowgate_") {
			t.Errorf("promlint: %s: %s", p.Metric, p.Text)
		}
	}

	// Temperatures in °C whatever the head's unit; none for a reading without one.
	if v := find(t, fams, "glowgate_temperature_celsius", map[string]string{"head": "caster-strand"}).GetGauge().GetValue(); v != 1151 {
		t.Errorf("caster-strand temperature %v, want 1151", v)
	}
	if v := find(t, fams, "glowgate_temperature_celsius", map[string]string{"head": "kiln-zone"}).GetGauge().GetValue(); !near(v, 1100, 1e-9) {
		t.Errorf("kiln-zone 1373.15 K = %v °C, want 1100", v)
	}
	if n := len(fams["glowgate_temperature_celsius"].GetMetric()); n != 2 {
		t.Errorf("%d temperature series, want 2 (ladle-stream has none)", n)
	}
	if v := find(t, fams, "glowgate_signal_fraction_ratio", map[string]string{"head": "kiln-zone", "channel": "c3"}).GetGauge().GetValue(); !near(v, 0.5*0.9, 1e-12) {
		t.Errorf("kiln-zone c3 fraction %v, want 0.45", v)
	}
	for q, want := range map[string]float64{"good": 1, "uncertain": 1, "bad": 0, "other": 0} {
		if v := find(t, fams, "glowgate_readings_total", map[string]string{"head": "caster-strand", "quality": q}).GetCounter().GetValue(); v != want {
			t.Errorf("caster-strand readings %s = %v, want %v", q, v, want)
		}
	}
	if v := find(t, fams, "glowgate_readings_total", map[string]string{"head": "ladle-stream", "quality": "bad"}).GetCounter().GetValue(); v != 1 {
		t.Errorf("ladle-stream bad readings = %v", v)
	}

	// Line counters.
	if v := find(t, fams, "glowgate_polls_total", map[string]string{"line": "melt-shop", "head": "ladle-stream"}).GetCounter().GetValue(); v != 100 {
		t.Errorf("polls = %v", v)
	}
	if v := find(t, fams, "glowgate_poll_errors_total", map[string]string{"line": "melt-shop", "head": "ladle-stream", "kind": "timeout"}).GetCounter().GetValue(); v != 2 {
		t.Errorf("timeouts = %v", v)
	}
	kinds := map[string]bool{}
	for _, m := range fams["glowgate_poll_errors_total"].GetMetric() {
		kinds[labels(m)["kind"]] = true
	}
	if len(kinds) != 5 || !kinds["frame"] || kinds["none"] {
		t.Errorf("error kinds %v, want timeout, exception, connection, malformed, frame", kinds)
	}
	if busy := find(t, fams, "glowgate_line_busy_seconds_total", map[string]string{"line": "melt-shop"}).GetCounter().GetValue(); !near(busy, 0.8, 1e-9) {
		t.Errorf("busy seconds %v, want 0.8", busy)
	}
	hist := find(t, fams, "glowgate_transaction_seconds", map[string]string{"line": "melt-shop"}).GetHistogram()
	if hist.GetSampleCount() != 200 || !near(hist.GetSampleSum(), 0.8, 1e-9) || len(hist.GetBucket()) != len(modbus.TransactionTimeBounds)+1 { // +Inf included
		t.Errorf("histogram count %d sum %v buckets %d", hist.GetSampleCount(), hist.GetSampleSum(), len(hist.GetBucket()))
	}
	for _, b := range hist.GetBucket() {
		want := uint64(0)
		switch {
		case b.GetUpperBound() >= 0.005:
			want = 200
		case b.GetUpperBound() >= 0.002:
			want = 50
		}
		if b.GetCumulativeCount() != want {
			t.Errorf("bucket le=%v: %d, want %d", b.GetUpperBound(), b.GetCumulativeCount(), want)
		}
	}

	// Publisher figures.
	checks := map[string]float64{
		"glowgate_outbox_depth":          7,
		"glowgate_outbox_oldest_seconds": 1.5,
		"glowgate_outbox_dropped_total":  3,
		"glowgate_published_total":       1234,
		"glowgate_broker_connected":      1,
	}
	for name, want := range checks {
		m := fams[name].GetMetric()[0]
		v := m.GetGauge().GetValue() + m.GetCounter().GetValue()
		if v != want {
			t.Errorf("%s = %v, want %v", name, v, want)
		}
	}
	// Alarms in alarm and not shelved, by priority: one high (the other is
	// shelved), one medium; normal, returned, latched, shelved, suppressed
	// and out-of-service ones do not count.
	for p, want := range map[string]float64{"urgent": 0, "high": 1, "medium": 1, "low": 0} {
		if v := find(t, fams, "glowgate_alarms_active", map[string]string{"priority": p}).GetGauge().GetValue(); v != want {
			t.Errorf("alarms_active{priority=%q} = %v, want %v", p, v, want)
		}
	}
	// When the shelving ends, the alarm counts again.
	clk.Set(t0.Add(2 * time.Hour))
	fams, _ = scrape(t, ts.URL)
	if v := find(t, fams, "glowgate_alarms_active", map[string]string{"priority": "high"}).GetGauge().GetValue(); v != 2 {
		t.Errorf("high alarms after the shelving = %v, want 2", v)
	}
	if v := find(t, fams, "glowgate_build_info", map[string]string{"version": "v1.2.3"}).GetGauge().GetValue(); v != 1 {
		t.Errorf("build_info = %v", v)
	}
}

func TestMetricsShareRegistry(t *testing.T) {
	// The daemon's own collectors in the same registry are served too; a
	// head name that is not UTF-8 spoils only its own series.
	s, ts := startServer(t, Options{})
	s.SetHeads(headInfos())
	s.Reading(testReading("bad\xffname", 1, t0, 1000, "degC", demoChannels[0], 0.5, "good"))
	s.Reading(testReading("caster-strand", 2, t0, 1000, "degC", demoChannels[0], 0.5, "good"))
	resp, body := get(t, ts.URL+"/metrics")
	if resp.StatusCode != http.StatusOK || !strings.Contains(body, `glowgate_temperature_celsius{head="caster-strand"} 1000`) {
		t.Errorf("/metrics with a bad label: %s\n%s", resp.Status, body)
	}
}
