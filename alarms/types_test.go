package alarms

import (
	"encoding/json"
	"testing"
)

func TestNames(t *testing.T) {
	states := map[State]string{
		Normal: "normal", Unacknowledged: "unacknowledged", Acknowledged: "acknowledged",
		ReturnedUnacknowledged: "rtn_unacknowledged", Latched: "latched", Shelved: "shelved",
		SuppressedByDesign: "suppressed", OutOfService: "out_of_service",
	}
	for s, name := range states {
		if s.String() != name {
			t.Errorf("State %d: %q, want %q", s, s.String(), name)
		}
		if p, err := ParseState(name); err != nil || p != s {
			t.Errorf("ParseState(%q) = %v, %v", name, p, err)
		}
	}
	if State(8).Valid() || State(8).String() != "state(8)" {
		t.Errorf("State(8): %q", State(8).String())
	}
	if _, err := State(8).MarshalText(); err == nil {
		t.Errorf("State(8) marshalled")
	}
	if _, err := ParseState("Normal"); err == nil {
		t.Errorf("ParseState is exact")
	}
	for k := High; k <= BadQuality; k++ {
		p, err := ParseKind(k.String())
		if err != nil || p != k {
			t.Errorf("ParseKind(%q) = %v, %v", k.String(), p, err)
		}
	}
	if k, err := ParseKind("High_High"); err != nil || k != HighHigh {
		t.Errorf("ParseKind ignores case: %v, %v", k, err)
	}
	if _, err := ParseKind("hihi"); err == nil || err.Error() != `alarm kind "hihi": want one of high, high_high, low, low_low, rate_rise, rate_fall, deviation, no_data, low_signal, nongrey, over_range, below_range, bad_quality` {
		t.Errorf("ParseKind(hihi): %v", err)
	}
	if Kind(0).String() != "kind(0)" || Kind(14).Valid() {
		t.Errorf("invalid kinds")
	}
	for p, name := range map[Priority]string{PriorityLow: "low", PriorityMedium: "medium", PriorityHigh: "high", PriorityUrgent: "urgent"} {
		if q, err := ParsePriority(name); err != nil || q != p || p.String() != name {
			t.Errorf("priority %q: %v, %v", name, q, err)
		}
	}
	if _, err := ParsePriority("critical"); err == nil || Priority(0).String() != "priority(0)" {
		t.Errorf("invalid priority accepted")
	}
	for _, q := range []Quality{Good, Uncertain, Bad} {
		if p, err := ParseQuality(q.String()); err != nil || p != q {
			t.Errorf("quality %v: %v, %v", q, p, err)
		}
	}
	if Quality(9).String() != "bad" {
		t.Errorf("Quality(9) is %q, want bad", Quality(9).String())
	}
	if _, err := ParseQuality("fine"); err == nil {
		t.Errorf("ParseQuality(fine) accepted")
	}
	if s := (FlagLowSignal | FlagCommError | 1<<15).String(); s != "low_signal|comm_error" {
		t.Errorf("flags %q", s)
	}
	if Flags(0).String() != "ok" {
		t.Errorf("no flags: %q", Flags(0).String())
	}
	for i := range numFlags {
		f := Flags(1 << i)
		if g, err := ParseFlag(f.String()); err != nil || g != f {
			t.Errorf("ParseFlag(%q) = %v, %v", f.String(), g, err)
		}
	}
	if _, err := ParseFlag("stale"); err == nil {
		t.Errorf("ParseFlag(stale) accepted")
	}
	if !Unacknowledged.Annunciated() || !Latched.Annunciated() || Acknowledged.Annunciated() || Shelved.Annunciated() {
		t.Errorf("Annunciated wrong")
	}
}

func TestTextRoundTrip(t *testing.T) {
	type doc struct {
		K Kind     `json:"kind"`
		P Priority `json:"priority"`
		S State    `json:"state"`
	}
	in := doc{RateFall, PriorityUrgent, ReturnedUnacknowledged}
	b, err := json.Marshal(in)
	if err != nil {
		t.Fatal(err)
	}
	if string(b) != `{"kind":"rate_fall","priority":"urgent","state":"rtn_unacknowledged"}` {
		t.Fatalf("JSON %s", b)
	}
	var out doc
	if err := json.Unmarshal(b, &out); err != nil || out != in {
		t.Fatalf("decoded %+v, %v", out, err)
	}
	for _, bad := range []string{`{"kind":"hot"}`, `{"priority":"p1"}`, `{"state":"alarm"}`} {
		if err := json.Unmarshal([]byte(bad), &out); err == nil {
			t.Errorf("%s decoded", bad)
		}
	}
	if _, err := Priority(0).MarshalText(); err == nil {
		t.Errorf("zero priority marshalled")
	}
	if _, err := json.Marshal(doc{}); err == nil {
		t.Errorf("zero kind and priority marshalled")
	}
}
