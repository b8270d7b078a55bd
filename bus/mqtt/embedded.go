package mqtt

import (
	"context"
	"fmt"
	"log/slog"
	"sync"

	mochi "github.com/mochi-mqtt/server/v2"
	"github.com/mochi-mqtt/server/v2/hooks/auth"
	"github.com/mochi-mqtt/server/v2/listeners"
)

// EmbeddedBroker is an MQTT broker inside the process (mochi-mqtt), open
// to anyone who can reach its address. It serves the zero-setup demo and
// tests on machines without Mosquitto.
type EmbeddedBroker struct {
	srv  *mochi.Server
	addr string
	once sync.Once
}

// StartEmbeddedBroker starts a broker listening on TCP addr, such as
// "127.0.0.1:1883" or "127.0.0.1:0" for a free port (see Addr). The
// broker's own log lines of level error and above go to logger (nil
// discards them).
func StartEmbeddedBroker(addr string, logger *slog.Logger) (*EmbeddedBroker, error) {
	if logger == nil {
		logger = slog.New(slog.DiscardHandler)
	}
	srv := mochi.New(&mochi.Options{
		// mochi warns with an empty message about every connection closed
		// under it at shutdown; only its errors are worth a line.
		Logger: slog.New(minLevel{min: slog.LevelError, h: logger.Handler()}),
	})
	if err := srv.AddHook(new(auth.AllowHook), nil); err != nil {
		return nil, fmt.Errorf("embedded broker: %w", err)
	}
	tcp := listeners.NewTCP(listeners.Config{ID: "tcp", Address: addr})
	// AddListener binds the socket, so Address reports the bound port.
	if err := srv.AddListener(tcp); err != nil {
		return nil, fmt.Errorf("embedded broker listen %s: %w", addr, err)
	}
	if err := srv.Serve(); err != nil {
		_ = srv.Close()
		return nil, fmt.Errorf("embedded broker serve %s: %w", addr, err)
	}
	return &EmbeddedBroker{srv: srv, addr: tcp.Address()}, nil
}

// Addr is the bound host:port.
func (b *EmbeddedBroker) Addr() string { return b.addr }

// URL is "tcp://" + Addr().
func (b *EmbeddedBroker) URL() string { return "tcp://" + b.addr }

// Close disconnects every client and stops listening. Further calls do
// nothing.
func (b *EmbeddedBroker) Close() error {
	var err error
	b.once.Do(func() { err = b.srv.Close() })
	return err
}

// minLevel passes on only records at or above min.
type minLevel struct {
	min slog.Level
	h   slog.Handler
}

func (m minLevel) Enabled(ctx context.Context, l slog.Level) bool {
	return l >= m.min && m.h.Enabled(ctx, l)
}

func (m minLevel) Handle(ctx context.Context, r slog.Record) error { return m.h.Handle(ctx, r) }

func (m minLevel) WithAttrs(as []slog.Attr) slog.Handler {
	return minLevel{min: m.min, h: m.h.WithAttrs(as)}
}

func (m minLevel) WithGroup(name string) slog.Handler {
	return minLevel{min: m.min, h: m.h.WithGroup(name)}
}
