package daemon

import (
	"context"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"glowgate/alarms"
	"glowgate/bus/modbus"
	"glowgate/daemon/status"
)

// startStatus serves the status page, /metrics and /healthz when the
// configuration asks for them. A page that cannot listen is logged and
// left out: the daemon's job is the readings.
func (d *Daemon) startStatus(ctx context.Context) (stop func()) {
	cfg := d.config()
	listen := cfg.HTTP.Listen
	if d.opts.HTTPListen != "" {
		listen = d.opts.HTTPListen
	}
	if listen == "" {
		return func() {}
	}
	srv, err := status.New(status.Options{
		Listen:   listen,
		Token:    cfg.HTTP.Token,
		Gateway:  cfg.Gateway,
		Version:  d.opts.Version,
		Logger:   d.log.With("part", "http"),
		Registry: d.registry(),
		Act: func(_ context.Context, a status.Action) error {
			return d.alarmAction(a.Kind, a.Head, a.Alarm, a.By, a.Until)
		},
		Now: d.now,
	})
	if err != nil {
		d.log.Error("status page not served", "listen", listen, "err", err)
		return func() {}
	}
	d.mu.Lock()
	d.status = srv
	d.mu.Unlock()
	srv.SetLineStats(d.lineStats)
	d.feedHeads()
	d.feedAlarms()
	d.feedHealth()
	d.log.Info("status page", "url", "http://"+srv.Addr()+"/")
	ctx, cancel := context.WithCancel(ctx)
	done := make(chan struct{}, 2)
	go func() {
		defer func() { done <- struct{}{} }()
		if err := srv.Run(ctx); err != nil {
			d.log.Error("status page stopped", "err", err)
		}
	}()
	go func() {
		defer func() { done <- struct{}{} }()
		t := time.NewTicker(time.Second)
		defer t.Stop()
		for {
			select {
			case <-ctx.Done():
				return
			case <-t.C:
				d.feedHealth()
			}
		}
	}()
	return func() {
		cancel()
		<-done
		<-done
	}
}

// StatusAddr is where the status page is served, "" when it is not.
func (d *Daemon) StatusAddr() string {
	d.mu.Lock()
	defer d.mu.Unlock()
	if d.status == nil {
		return ""
	}
	return d.status.Addr()
}

// feedHeads tells the page what the heads are.
func (d *Daemon) feedHeads() {
	d.mu.Lock()
	srv, heads := d.status, d.heads
	d.mu.Unlock()
	if srv == nil {
		return
	}
	infos := make([]status.HeadInfo, 0, len(heads))
	for _, h := range heads {
		c := h.cfg
		in := status.HeadInfo{
			Name: c.Name, Description: c.Description, Line: c.Endpoint + c.Line, Unit: h.unit,
			RangeMin: *h.temperature(c.RangeMin), RangeMax: *h.temperature(c.RangeMax),
			Settings: map[string]any{
				"emissivity_ratio": h.k,
				"publish":          publishName(c),
				"low_signal":       c.LowSignal,
				"period":           c.Period.String(),
				"processing":       c.Processing,
			},
			Calibration: map[string]any{"c2": h.c2},
		}
		for i, ch := range c.Channels {
			in.Channels = append(in.Channels, status.ChannelInfo{Name: ch.Name, WavelengthUM: h.channels[i].WavelengthUM})
			switch {
			case ch.Band != nil:
				in.Calibration[ch.Name] = map[string]any{"band_um": []float64{ch.Band.From * 1e6, ch.Band.To * 1e6}}
			case ch.SakumaHattori != nil:
				sh := ch.SakumaHattori
				in.Calibration[ch.Name] = map[string]any{"sakuma_hattori": map[string]float64{"a_um": sh.A * 1e6, "b_umK": sh.B * 1e6, "c": sh.C}}
			case ch.Responsivity != nil:
				in.Calibration[ch.Name] = map[string]any{"responsivity_points": len(ch.Responsivity.Wavelengths)}
			}
		}
		infos = append(infos, in)
	}
	srv.SetHeads(infos)
}

// feedAlarms tells the page the state of every alarm.
func (d *Daemon) feedAlarms() {
	d.mu.Lock()
	srv, heads := d.status, d.heads
	d.mu.Unlock()
	if srv == nil {
		return
	}
	var views []status.AlarmView
	eachAlarm(heads, func(h *head, _ *headAlarms, a *alarms.Alarm) {
		st := a.Status()
		views = append(views, status.AlarmView{
			Head: h.cfg.Name, Name: st.Name, State: st.State.String(), Priority: st.Priority.String(),
			Message: st.Message, Since: st.Since, ShelvedUntil: st.ShelvedUntil,
		})
	})
	srv.SetAlarms(views)
}

// feedHealth tells the page how the publisher and the outbox fare.
func (d *Daemon) feedHealth() {
	d.mu.Lock()
	srv, ob := d.status, d.outbox
	d.mu.Unlock()
	if srv == nil {
		return
	}
	ps := d.PublisherStats()
	h := status.Health{BrokerConnected: ps.Connected, Broker: ps.Broker, Published: ps.Published, OutboxDepth: ps.Queued, OutboxDropped: ps.Dropped}
	if ob != nil {
		os := ob.Stats()
		h.OutboxDepth, h.OutboxOldest, h.OutboxDropped = os.Depth, os.OldestAge, os.Dropped
		h.Published += ps.OutboxAcked
	}
	srv.SetHealth(h)
}

// lineStats are the figures of every running line.
func (d *Daemon) lineStats() []modbus.LineStats {
	d.mu.Lock()
	lines := d.lines
	d.mu.Unlock()
	out := make([]modbus.LineStats, len(lines))
	for i, l := range lines {
		out[i] = l.Stats()
	}
	return out
}

// registry is the daemon's one metrics registry: the status page's
// metrics, the alarm load, and the Go runtime's and the process's.
func (d *Daemon) registry() *prometheus.Registry {
	r := prometheus.NewRegistry()
	r.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	r.MustRegister(prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Name: "glowgate_alarm_annunciations_10m",
		Help: "Alarm annunciations at this gateway within the last ten minutes (ISA-18.2 calls more than 10 a flood).",
	}, func() float64 {
		n, _ := d.alarmLoad(d.now())
		return float64(n)
	}))
	r.MustRegister(prometheus.NewGaugeFunc(prometheus.GaugeOpts{
		Name: "glowgate_alarms_chattering",
		Help: "Alarms that activated three or more times within the last minute.",
	}, func() float64 {
		_, c := d.alarmLoad(d.now())
		return float64(len(c))
	}))
	return r
}
