package status

import (
	"math"

	"github.com/prometheus/client_golang/prometheus"

	"glowgate/bus/modbus"
)

// collector exposes the Server's figures to Prometheus, read at scrape
// time: the latest reading of each head, reading counts, the lines'
// counters (SetLineStats), the publisher's figures (SetHealth) and the
// alarm list. Names follow Prometheus practice: base units (°C is the
// base unit of temperature there, seconds for time), _total on counters,
// _ratio for fractions. Labels are configured names only (head, line,
// channel, alarm priority) and fixed words (quality, error kind).
type collector struct {
	s                                        *Server
	temperature, fraction, readings          *prometheus.Desc
	polls, pollErrors, transaction, busy     *prometheus.Desc
	outboxDepth, outboxOldest, outboxDropped *prometheus.Desc
	published, brokerConnected               *prometheus.Desc
	alarmsActive, buildInfo                  *prometheus.Desc
}

func newCollector(s *Server) *collector {
	d := prometheus.NewDesc
	return &collector{
		s:               s,
		temperature:     d("glowgate_temperature_celsius", "Processed temperature of the head's latest reading, in degrees Celsius; absent while it cannot be computed.", []string{"head"}, nil),
		fraction:        d("glowgate_signal_fraction_ratio", "Signal fraction of a channel in the head's latest reading: its signal over that of a blackbody at the ratio temperature.", []string{"head", "channel"}, nil),
		readings:        d("glowgate_readings_total", "Readings of the head by quality (good, uncertain, bad, other).", []string{"head", "quality"}, nil),
		polls:           d("glowgate_polls_total", "Polls of the head on its field-bus line, failed ones included.", []string{"line", "head"}, nil),
		pollErrors:      d("glowgate_poll_errors_total", "Failed transactions of the head's polls by kind (timeout, exception, connection, malformed, frame).", []string{"line", "head", "kind"}, nil),
		transaction:     d("glowgate_transaction_seconds", "Time of one Modbus transaction (a request and its answer or failure) on the line.", []string{"line"}, nil),
		busy:            d("glowgate_line_busy_seconds_total", "Time the line had a transaction in flight; with several requests in flight at once, counted once. Its rate is the line's busy fraction.", []string{"line"}, nil),
		outboxDepth:     d("glowgate_outbox_depth", "Messages waiting in the outbox to be published.", nil, nil),
		outboxOldest:    d("glowgate_outbox_oldest_seconds", "Age of the oldest message waiting in the outbox; 0 when it is empty.", nil, nil),
		outboxDropped:   d("glowgate_outbox_dropped_total", "Messages dropped because the outbox was full.", nil, nil),
		published:       d("glowgate_published_total", "Messages acknowledged by a broker.", nil, nil),
		brokerConnected: d("glowgate_broker_connected", "1 while connected to a broker, else 0.", nil, nil),
		alarmsActive:    d("glowgate_alarms_active", "Alarms in alarm and not shelved, by priority.", []string{"priority"}, nil),
		buildInfo:       d("glowgate_build_info", "Always 1; the version label says which glowgate runs.", []string{"version"}, nil),
	}
}

func (c *collector) Describe(ch chan<- *prometheus.Desc) {
	for _, d := range []*prometheus.Desc{
		c.temperature, c.fraction, c.readings, c.polls, c.pollErrors, c.transaction, c.busy,
		c.outboxDepth, c.outboxOldest, c.outboxDropped, c.published, c.brokerConnected,
		c.alarmsActive, c.buildInfo,
	} {
		ch <- d
	}
}

func (c *collector) Collect(ch chan<- prometheus.Metric) {
	s := c.s
	lines := s.lineStatsNow() // outside s.mu: the function may take the lines' own locks
	now := s.now()
	gauge, counter := prometheus.GaugeValue, prometheus.CounterValue
	// A label that is not valid UTF-8 (a head named so in a configuration)
	// spoils its own series only: the scrape reports it and goes on.
	must := func(d *prometheus.Desc, t prometheus.ValueType, v float64, labels ...string) prometheus.Metric {
		m, err := prometheus.NewConstMetric(d, t, v, labels...)
		if err != nil {
			return prometheus.NewInvalidMetric(d, err)
		}
		return m
	}

	s.mu.Lock()
	for _, name := range s.order {
		h := s.heads[name]
		if !math.IsNaN(h.tempC) && h.latest != nil {
			ch <- must(c.temperature, gauge, h.tempC, name)
		}
		for i, f := range h.fractions {
			if !math.IsNaN(f) && !math.IsInf(f, 0) {
				ch <- must(c.fraction, gauge, f, name, h.channels[i])
			}
		}
		for q, n := range h.counts {
			ch <- must(c.readings, counter, float64(n), name, qualities[q])
		}
	}
	hl := s.health
	active := map[string]float64{"urgent": 0, "high": 0, "medium": 0, "low": 0}
	for _, a := range s.alarms {
		if alarmActive(a, now) {
			active[a.Priority]++
		}
	}
	s.mu.Unlock()

	ch <- must(c.outboxDepth, gauge, float64(hl.OutboxDepth))
	ch <- must(c.outboxOldest, gauge, hl.OutboxOldest.Seconds())
	ch <- must(c.outboxDropped, counter, float64(hl.OutboxDropped))
	ch <- must(c.published, counter, float64(hl.Published))
	connected := 0.0
	if hl.BrokerConnected {
		connected = 1
	}
	ch <- must(c.brokerConnected, gauge, connected)
	for p, n := range active {
		ch <- must(c.alarmsActive, gauge, n, p)
	}
	ch <- must(c.buildInfo, gauge, 1, s.o.Version)

	for _, ls := range lines {
		ch <- must(c.busy, counter, ls.BusyTime.Seconds(), ls.Name)
		for _, p := range ls.Polls {
			ch <- must(c.polls, counter, float64(p.Polls), ls.Name, p.Name)
			for k := modbus.KindTimeout; k <= modbus.KindFrame; k++ {
				ch <- must(c.pollErrors, counter, float64(p.Errors[k]), ls.Name, p.Name, k.String())
			}
		}
		buckets := make(map[float64]uint64, len(modbus.TransactionTimeBounds))
		for i, b := range modbus.TransactionTimeBounds {
			buckets[b.Seconds()] = ls.Times.Buckets[i]
		}
		m, err := prometheus.NewConstHistogram(c.transaction, ls.Times.Count, ls.Times.Sum.Seconds(), buckets, ls.Name)
		if err != nil {
			m = prometheus.NewInvalidMetric(c.transaction, err)
		}
		ch <- m
	}
}
