package daemon

import (
	"context"
	"fmt"
	"hash/fnv"
	"log/slog"

	"glowgate/bus/modbus"
	"glowgate/bus/sim"
	"glowgate/daemon/config"
)

// Simulator serves every head of a configuration from simulated
// physics at the endpoints the configuration names.
type Simulator struct {
	servers []*sim.Server
	addrs   map[string]string
}

// NewSimulator builds one simulated Modbus TCP server per endpoint.
// Heads without a sim section glow steadily at the middle of their range.
func NewSimulator(cfg *config.Config, logger *slog.Logger) (*Simulator, error) {
	if logger == nil {
		logger = slog.New(slog.DiscardHandler)
	}
	s := &Simulator{addrs: map[string]string{}}
	for _, ep := range cfg.Endpoints {
		var heads []sim.Head
		for _, hc := range cfg.Heads {
			if hc.Endpoint != ep.Name {
				continue
			}
			h, err := simHead(cfg, hc)
			if err != nil {
				return nil, err
			}
			heads = append(heads, h)
		}
		if len(heads) == 0 {
			continue
		}
		srv, err := sim.NewServer(ep.Address, heads, logger.With("endpoint", ep.Name))
		if err != nil {
			return nil, fmt.Errorf("simulate endpoint %s: %w", ep.Name, err)
		}
		s.servers = append(s.servers, srv)
		s.addrs[ep.Name] = ep.Address
	}
	return s, nil
}

// Start begins serving; the scenarios' time zero is now.
func (s *Simulator) Start(ctx context.Context) error {
	for i, srv := range s.servers {
		if err := srv.Start(ctx); err != nil {
			for _, started := range s.servers[:i] {
				started.Close()
			}
			return err
		}
	}
	return nil
}

// Close stops every server.
func (s *Simulator) Close() error {
	var first error
	for _, srv := range s.servers {
		if err := srv.Close(); err != nil && first == nil {
			first = err
		}
	}
	return first
}

// Addresses maps each served endpoint to its listening address.
func (s *Simulator) Addresses() map[string]string { return s.addrs }

func simHead(cfg *config.Config, hc config.Head) (sim.Head, error) {
	table, err := modbus.ParseTable(hc.Registers)
	if err != nil {
		return sim.Head{}, fmt.Errorf("head %s: %w", hc.Name, err)
	}
	h := sim.Head{
		Name:         hc.Name,
		Unit:         hc.UnitID,
		Table:        table,
		Temperature:  simProfile(hc.Sim.Temperature),
		Transmission: simProfile(hc.Sim.Transmission),
		Noise:        hc.Sim.Noise,
		Seed:         hc.Sim.Seed,
	}
	if h.Seed == 0 {
		f := fnv.New64a()
		f.Write([]byte(hc.Name))
		h.Seed = int64(f.Sum64() >> 1)
	}
	for i, ch := range hc.Channels {
		m, err := channelModel(cfg, ch)
		if err != nil {
			return sim.Head{}, fmt.Errorf("head %s channel %s: %w", hc.Name, ch.Name, err)
		}
		f, err := signalField(ch.Signal)
		if err != nil {
			return sim.Head{}, fmt.Errorf("head %s channel %s: %w", hc.Name, ch.Name, err)
		}
		eps := 1.0
		if i < len(hc.Sim.Emissivity) {
			eps = hc.Sim.Emissivity[i]
		}
		h.Channels = append(h.Channels, sim.Channel{Model: m, Emissivity: eps, Field: f})
	}
	return h, nil
}

func simProfile(p config.Profile) sim.Profile {
	out := sim.Profile{Start: p.Start, Repeat: p.Repeat}
	for _, s := range p.Segments {
		var kind sim.SegmentKind
		switch s.Kind {
		case "hold":
			kind = sim.Hold
		case "ramp":
			kind = sim.Ramp
		case "step":
			kind = sim.Step
		}
		out.Segments = append(out.Segments, sim.Segment{Kind: kind, Value: s.Value, Duration: s.Duration})
	}
	return out
}
