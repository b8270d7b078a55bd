package daemon

import (
	"fmt"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/daemon/config"
)

// Convert turns channel signals given by hand into the reading the daemon
// would publish for the named head, acquired at t. Its sequence number is 0.
func Convert(cfg *config.Config, headName string, signals []float64, t time.Time) (mqtt.Reading, error) {
	hc, ok := cfg.Head(headName)
	if !ok {
		return mqtt.Reading{}, fmt.Errorf("no head %q in %s", headName, cfg.File)
	}
	if len(signals) != len(hc.Channels) {
		return mqtt.Reading{}, fmt.Errorf("head %s has %d channels, got %d signals", headName, len(hc.Channels), len(signals))
	}
	h, err := newHead(cfg, *hc, nil)
	if err != nil {
		return mqtt.Reading{}, err
	}
	return h.reading(t, signals), nil
}
