package daemon

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"net"
	"strings"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/configs"
	"glowgate/daemon/config"
)

// DemoOptions configure Demo.
type DemoOptions struct {
	// BrokerListen is where the embedded broker listens; empty means
	// 127.0.0.1:1883, or a free loopback port when that one is taken.
	BrokerListen string
	// HTTP is where the status page is served; empty means
	// 127.0.0.1:8080, or a free loopback port when that one is taken.
	HTTP string
	// Out receives the banner and the live summary.
	Out io.Writer
	// SummaryEvery is the interval of the live summary (default 5 s).
	SummaryEvery time.Duration
	Logger       *slog.Logger
	Version      string
}

// Demo runs the whole chain on the embedded demonstration configuration:
// an embedded broker, the simulated heads and the daemon, until ctx is done.
func Demo(ctx context.Context, o DemoOptions) error {
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	if o.SummaryEvery <= 0 {
		o.SummaryEvery = 5 * time.Second
	}
	cfg, err := config.Parse("demo.yaml", configs.Demo)
	if err != nil {
		return fmt.Errorf("embedded demo configuration: %w", err)
	}
	listen := o.BrokerListen
	if listen == "" {
		listen = availableAddr("127.0.0.1:1883")
	}
	broker, err := mqtt.StartEmbeddedBroker(listen, o.Logger.With("part", "broker"))
	if err != nil {
		return fmt.Errorf("embedded broker on %s: %w", listen, err)
	}
	defer broker.Close()

	for i := range cfg.Endpoints {
		cfg.Endpoints[i].Address = availableAddr(cfg.Endpoints[i].Address)
	}
	simulator, err := NewSimulator(cfg, o.Logger.With("part", "sim"))
	if err != nil {
		return err
	}
	if err := simulator.Start(ctx); err != nil {
		return err
	}
	defer simulator.Close()

	httpAddr := o.HTTP
	if httpAddr == "" {
		httpAddr = availableAddr("127.0.0.1:8080")
	}
	d, err := New(Options{
		Config:     cfg,
		HTTPListen: httpAddr,
		Brokers:    []string{"tcp://" + broker.Addr()},
		Logger:     o.Logger,
		Version:    o.Version,
	})
	if err != nil {
		return err
	}
	host, port, _ := net.SplitHostPort(broker.Addr())
	fmt.Fprintf(o.Out, "glowgate demo: gateway %s, %d simulated heads\n", cfg.Gateway, len(cfg.Heads))
	fmt.Fprintf(o.Out, "  broker (embedded): %s\n", broker.Addr())
	for name, addr := range simulator.Addresses() {
		fmt.Fprintf(o.Out, "  simulated heads:   %s (%s)\n", addr, name)
	}
	fmt.Fprintf(o.Out, "  subscribe with:    mosquitto_sub -h %s -p %s -t '%s/#' -v\n", host, port, cfg.MQTT.Root)
	fmt.Fprintf(o.Out, "  status page:       http://%s/\n", httpAddr)
	fmt.Fprintf(o.Out, "  stop with Ctrl-C\n")

	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	tick := time.NewTicker(o.SummaryEvery)
	defer tick.Stop()
	for {
		select {
		case err := <-done:
			return err
		case <-tick.C:
			writeSummary(o.Out, d)
		}
	}
}

// writeSummary prints one line per head: its latest reading at a glance.
func writeSummary(w io.Writer, d *Daemon) {
	stats := d.PublisherStats()
	link := "broker down"
	if stats.Connected {
		link = "broker up"
	}
	fmt.Fprintf(w, "%s  %s, published %d, queued %d, dropped %d\n",
		time.Now().Format("15:04:05"), link, stats.Published, stats.Queued, stats.Dropped)
	for _, r := range d.Latest() {
		fmt.Fprintf(w, "  %-16s %s  %-9s %s  %s\n", r.Head, formatTemp(r.Temperature, r.Unit), r.Quality, formatFractions(r.Channels), formatFlags(r.Flags))
	}
}

func formatTemp(t *float64, unit string) string {
	if t == nil {
		return fmt.Sprintf("%9s %-4s", "--", unit)
	}
	return fmt.Sprintf("%9.1f %-4s", *t, unit)
}

func formatFractions(chans []mqtt.Channel) string {
	parts := make([]string, len(chans))
	for i, c := range chans {
		if c.SignalFraction == nil {
			parts[i] = "  -- "
			continue
		}
		parts[i] = fmt.Sprintf("%5.1f%%", *c.SignalFraction*100)
	}
	return "signal " + strings.Join(parts, " ")
}

func formatFlags(flags []string) string {
	if len(flags) == 0 {
		return ""
	}
	return "[" + strings.Join(flags, " ") + "]"
}

// availableAddr returns addr when it can be listened on now, otherwise a
// free port on the same host. The port is released before it is used, so
// another process could take it in between; the demo accepts that.
func availableAddr(addr string) string {
	if l, err := net.Listen("tcp", addr); err == nil {
		l.Close()
		return addr
	}
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		host = "127.0.0.1"
	}
	l, err := net.Listen("tcp", net.JoinHostPort(host, "0"))
	if err != nil {
		return addr
	}
	defer l.Close()
	return l.Addr().String()
}
