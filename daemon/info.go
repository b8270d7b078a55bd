package daemon

import (
	"encoding/json"

	"glowgate/convert"
)

// info is the retained payload of <root>/<gateway>/<head>/info: what the
// head is and the settings its readings were converted with.
type info struct {
	Gateway         string        `json:"gateway"`
	Head            string        `json:"head"`
	Description     string        `json:"description,omitempty"`
	Endpoint        string        `json:"endpoint"`
	UnitID          uint8         `json:"unit_id"`
	PeriodMS        float64       `json:"period_ms"`
	Unit            string        `json:"unit"`
	RangeMin        float64       `json:"range_min"`
	RangeMax        float64       `json:"range_max"`
	EmissivityRatio float64       `json:"emissivity_ratio"`
	LowSignal       float64       `json:"low_signal"`
	C2              float64       `json:"c2"`
	Channels        []infoChannel `json:"channels"`
	Version         string        `json:"version"`
}

type infoChannel struct {
	Name          string             `json:"name"`
	WavelengthUM  float64            `json:"wavelength_um"`
	Band          *infoBand          `json:"band,omitempty"`
	SakumaHattori *infoSakumaHattori `json:"sakuma_hattori,omitempty"`
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
		UnitID:          c.UnitID,
		PeriodMS:        float64(c.Period.Microseconds()) / 1e3,
		Unit:            h.unit,
		RangeMin:        *h.temperature(c.RangeMin),
		RangeMax:        *h.temperature(c.RangeMax),
		EmissivityRatio: c.EmissivityRatio,
		LowSignal:       c.LowSignal,
		C2:              convert.C2ITS90,
		Version:         version,
	}
	for _, ch := range c.Channels {
		ic := infoChannel{Name: ch.Name, WavelengthUM: round(ch.Wavelength()*1e6, 6)}
		if b := ch.Band; b != nil {
			ic.Band = &infoBand{FromUM: round(b.From*1e6, 6), ToUM: round(b.To*1e6, 6)}
		}
		if sh := ch.SakumaHattori; sh != nil {
			ic.SakumaHattori = &infoSakumaHattori{AUM: sh.A * 1e6, BUMK: sh.B * 1e6, C: sh.C}
		}
		in.Channels = append(in.Channels, ic)
	}
	b, err := json.Marshal(in)
	if err != nil {
		// Only finite numbers and strings go in; failure is a programming error.
		panic("daemon: info payload: " + err.Error())
	}
	return b
}
