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

// Simulator serves every head of a configuration from simulated physics:
// a Modbus TCP server at each endpoint, and an RTU server on a
// pseudo-terminal for each RS-485 line, linked at the line's device path.
type Simulator struct {
	servers []simServer
	names   []string // "endpoint NAME" or "line NAME", per server
}

// simServer is a simulated endpoint or line.
type simServer interface {
	Start(ctx context.Context) error
	Close() error
}

// NewSimulator builds the servers. Heads without a sim section glow
// steadily at the middle of their range.
func NewSimulator(cfg *config.Config, logger *slog.Logger) (*Simulator, error) {
	if logger == nil {
		logger = slog.New(slog.DiscardHandler)
	}
	headsOn := func(pick func(config.Head) bool) ([]sim.Head, error) {
		var heads []sim.Head
		for _, hc := range cfg.Heads {
			if !pick(hc) {
				continue
			}
			h, err := simHead(cfg, hc)
			if err != nil {
				return nil, err
			}
			heads = append(heads, h)
		}
		return heads, nil
	}
	s := &Simulator{}
	for _, ep := range cfg.Endpoints {
		heads, err := headsOn(func(h config.Head) bool { return h.Endpoint == ep.Name })
		if err != nil || len(heads) == 0 {
			if err != nil {
				return nil, err
			}
			continue
		}
		srv, err := sim.NewServer(ep.Address, heads, logger.With("endpoint", ep.Name))
		if err != nil {
			return nil, fmt.Errorf("simulate endpoint %s: %w", ep.Name, err)
		}
		s.servers = append(s.servers, srv)
		s.names = append(s.names, "endpoint "+ep.Name)
	}
	for _, l := range cfg.Lines {
		heads, err := headsOn(func(h config.Head) bool { return h.Line == l.Name })
		if err != nil || len(heads) == 0 {
			if err != nil {
				return nil, err
			}
			continue
		}
		srv, err := sim.NewRTUServer(sim.RTUConfig{Link: l.Device, Baud: l.Baud}, heads, logger.With("line", l.Name))
		if err != nil {
			return nil, fmt.Errorf("simulate line %s: %w", l.Name, err)
		}
		s.servers = append(s.servers, srv)
		s.names = append(s.names, "line "+l.Name)
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
			return fmt.Errorf("simulate %s: %w", s.names[i], err)
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

// Addresses says where each started server serves: "endpoint NAME" ->
// "modbus tcp HOST:PORT", "line NAME" -> "modbus rtu /dev/pts/N (linked
// at PATH, B baud)".
func (s *Simulator) Addresses() map[string]string {
	out := map[string]string{}
	for i, srv := range s.servers {
		switch v := srv.(type) {
		case *sim.Server:
			out[s.names[i]] = "modbus tcp " + v.Address()
		case *sim.RTUServer:
			out[s.names[i]] = "modbus rtu " + v.Path()
		}
	}
	return out
}

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
	if err := simFieldBus(hc, &h); err != nil {
		return sim.Head{}, fmt.Errorf("head %s: %w", hc.Name, err)
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

// simFieldBus maps a head's status word, extras and faults to the
// simulator's.
func simFieldBus(hc config.Head, h *sim.Head) error {
	tableOf := func(name string) (*modbus.Table, error) {
		if name == "" {
			return nil, nil
		}
		t, err := modbus.ParseTable(name)
		return &t, err
	}
	if st := hc.Status; st != nil {
		t, err := tableOf(st.Table)
		if err != nil {
			return err
		}
		word := &sim.StatusWord{Field: modbus.Field{Address: st.Address, Type: modbus.Uint16, Scale: 1}, Table: t}
		for _, ep := range hc.Sim.StatusFlags {
			for bit, flag := range st.Bits {
				if flag == ep.Flag {
					word.Bits = append(word.Bits, sim.BitEpisode{Bit: bit, At: ep.At, For: ep.For, Period: ep.Period})
				}
			}
		}
		h.Status = word
	}
	for _, e := range hc.Extras {
		t, err := tableOf(e.Table)
		if err != nil {
			return err
		}
		f, err := signalField(e.Signal)
		if err != nil {
			return err
		}
		h.Extras = append(h.Extras, sim.Extra{Name: e.Name, Field: f, Table: t, Value: simProfile(hc.Sim.Extras[e.Name])})
	}
	for _, f := range hc.Sim.Faults {
		kind, err := sim.ParseFaultKind(f.Kind)
		if err != nil {
			return err
		}
		h.Faults = append(h.Faults, sim.Fault{Kind: kind, Code: f.Code, Delay: f.Delay, At: f.At, For: f.For, Period: f.Period, Every: f.Every})
	}
	return nil
}
