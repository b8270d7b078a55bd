package daemon

import (
	"encoding/json"

	"glowgate/daemon/config"
)

// info is the retained payload of <root>/<gateway>/<head>/info: what the
// head is and the settings its readings were converted with.
type info struct {
	Gateway         string         `json:"gateway"`
	Head            string         `json:"head"`
	Description     string         `json:"description,omitempty"`
	Endpoint        string         `json:"endpoint,omitempty"`
	Line            string         `json:"line,omitempty"`
	Status          map[int]string `json:"status_bits,omitempty"`
	Extras          []infoExtra    `json:"extras,omitempty"`
	UnitID          uint8          `json:"unit_id"`
	PeriodMS        float64        `json:"period_ms"`
	Unit            string         `json:"unit"`
	RangeMin        float64        `json:"range_min"`
	RangeMax        float64        `json:"range_max"`
	EmissivityRatio float64        `json:"emissivity_ratio"`
	LowSignal       float64        `json:"low_signal"`
	C2              float64        `json:"c2"`
	Channels        []infoChannel  `json:"channels"`
	Publish         string         `json:"publish"`
	Emissivity      []float64      `json:"emissivity,omitempty"`
	NongreyLimit    float64        `json:"nongrey_limit,omitempty"`
	Processing      infoProcess    `json:"processing"`
	Uncertainty     infoUncert     `json:"uncertainty"`
	Version         string         `json:"version"`
}

type infoExtra struct {
	Name      string   `json:"name"`
	Kind      string   `json:"kind"`
	WarnAbove *float64 `json:"warn_above,omitempty"` // in the reading's unit
	Expect    *float64 `json:"expect,omitempty"`
	Tolerance *float64 `json:"tolerance,omitempty"`
}

type infoProcess struct {
	AverageS       float64 `json:"average_s,omitempty"`
	T90S           float64 `json:"t90_s,omitempty"`
	Hold           string  `json:"hold"`
	DecayKPerS     float64 `json:"decay_K_per_s,omitempty"`
	ResetS         float64 `json:"reset_s,omitempty"`
	HoldLastValidS float64 `json:"hold_last_valid_s,omitempty"`
}

type infoUncert struct {
	Noise           any     `json:"noise"` // "estimate" or one relative value per channel
	Correlation     float64 `json:"correlation"`
	EmissivityRatio float64 `json:"emissivity_ratio"`
	CalibrationK    float64 `json:"calibration_K"`
}

type infoChannel struct {
	Name          string             `json:"name"`
	WavelengthUM  float64            `json:"wavelength_um"`
	Band          *infoBand          `json:"band,omitempty"`
	SakumaHattori *infoSakumaHattori `json:"sakuma_hattori,omitempty"`
	Responsivity  *infoTable         `json:"responsivity,omitempty"`
	Calibration   *infoTable         `json:"calibration,omitempty"` // the table the Sakuma–Hattori curve was fitted to
	Saturation    float64            `json:"saturation,omitempty"`
}

type infoTable struct {
	Points int    `json:"points"`
	File   string `json:"file,omitempty"`
}

type infoBand struct {
	FromUM float64 `json:"from_um"`
	ToUM   float64 `json:"to_um"`
}

type infoSakumaHattori struct {
	AUM  float64 `json:"a_um"`
	BUMK float64 `json:"b_umK"`
	C    float64 `json:"c"`
}

// infoPayload describes h for its retained info topic.
func (h *head) infoPayload(version string) []byte {
	c := h.cfg
	in := info{
		Gateway:         h.gateway,
		Head:            c.Name,
		Description:     c.Description,
		Endpoint:        c.Endpoint,
		Line:            c.Line,
		UnitID:          c.UnitID,
		PeriodMS:        float64(c.Period.Microseconds()) / 1e3,
		Unit:            h.unit,
		RangeMin:        *h.temperature(c.RangeMin),
		RangeMax:        *h.temperature(c.RangeMax),
		EmissivityRatio: c.EmissivityRatio,
		LowSignal:       c.LowSignal,
		C2:              h.c2,
		Publish:         publishName(c),
		NongreyLimit:    c.NongreyLimit,
		Processing: infoProcess{
			AverageS:       c.Processing.Average.Seconds(),
			T90S:           c.Processing.T90.Seconds(),
			Hold:           c.Processing.Hold,
			DecayKPerS:     c.Processing.Decay,
			ResetS:         c.Processing.Reset.Seconds(),
			HoldLastValidS: c.Processing.HoldLastValid.Seconds(),
		},
		Uncertainty: infoUncert{
			Noise:           "estimate",
			Correlation:     c.Uncertainty.Correlation,
			EmissivityRatio: c.Uncertainty.EmissivityRatio,
			CalibrationK:    c.Uncertainty.Calibration,
		},
		Version: version,
	}
	if c.Uncertainty.Noise != nil {
		in.Uncertainty.Noise = c.Uncertainty.Noise
	}
	if len(c.Channels) > 2 {
		in.Emissivity = c.Emissivity
	}
	if c.Status != nil {
		in.Status = c.Status.Bits
	}
	for _, e := range c.Extras {
		ie := infoExtra{Name: e.Name, Kind: e.Kind}
		if e.WarnAbove > 0 {
			w := *h.temperature(e.WarnAbove)
			ie.WarnAbove = &w
		}
		if e.Kind == "setting" {
			ie.Expect, ie.Tolerance = &e.Expect, &e.Tolerance
		}
		in.Extras = append(in.Extras, ie)
	}
	for _, ch := range c.Channels {
		ic := infoChannel{Name: ch.Name, WavelengthUM: round(ch.Wavelength()*1e6, 6)}
		if b := ch.Band; b != nil {
			ic.Band = &infoBand{FromUM: round(b.From*1e6, 6), ToUM: round(b.To*1e6, 6)}
		}
		if sh := ch.SakumaHattori; sh != nil {
			ic.SakumaHattori = &infoSakumaHattori{AUM: sh.A * 1e6, BUMK: sh.B * 1e6, C: sh.C}
		}
		if r := ch.Responsivity; r != nil {
			ic.Responsivity = &infoTable{Points: len(r.Wavelengths), File: r.File}
		}
		if cal := ch.Calibration; cal != nil {
			ic.Calibration = &infoTable{Points: len(cal.Temperatures), File: cal.File}
		}
		ic.Saturation = ch.Saturation
		in.Channels = append(in.Channels, ic)
	}
	b, err := json.Marshal(in)
	if err != nil {
		// Only finite numbers and strings go in; failure is a programming error.
		panic("daemon: info payload: " + err.Error())
	}
	return b
}

// publishName names the published temperature as the configuration does.
func publishName(c config.Head) string {
	if c.Publish.Kind == "pair" {
		return c.Channels[c.Publish.I].Name + "/" + c.Channels[c.Publish.J].Name
	}
	return c.Publish.Kind
}
