package mqtt_test

import (
	"strings"
	"testing"

	"glowgate/bus/mqtt"
)

// The tree is the Topics contract of the design.
func TestTopics(t *testing.T) {
	tp := mqtt.Topics{Root: "glowgate", Gateway: "caster2"}
	for _, c := range []struct{ got, want string }{
		{tp.State(), "glowgate/caster2/state"},
		{tp.Reading("mould-exit"), "glowgate/caster2/mould-exit/reading"},
		{tp.Info("mould-exit"), "glowgate/caster2/mould-exit/info"},
		{tp.Events(), "glowgate/caster2/events"},
		{tp.Alarm("mould-exit", "over_temperature"), "glowgate/caster2/mould-exit/alarm/over_temperature"},
		{tp.Cmd(), "glowgate/caster2/cmd"},
		{tp.CmdReply(), "glowgate/caster2/cmd/reply"},
		{mqtt.Topics{Root: "plant/hot-mill", Gateway: "gw1"}.State(), "plant/hot-mill/gw1/state"},
	} {
		if c.got != c.want {
			t.Errorf("got %q, want %q", c.got, c.want)
		}
	}
}

func TestCheckTopicPart(t *testing.T) {
	for _, c := range []struct {
		in      string
		wantErr string // "" for valid
	}{
		{"caster2", ""},
		{"mould exit", ""}, // inner space is legal
		{"Ofen-3_ÄÖÜ", ""}, // any UTF-8
		{"炉", ""},          // any UTF-8
		{"$gw", ""},        // '$' matters only at the start of a topic
		{strings.Repeat("a", 65535), ""},
		{"", "empty"},
		{"a/b", "'/'"},
		{"a+b", "wildcard"},
		{"#", "wildcard"},
		{"a\x00b", "NUL"},
		{"a\tb", "control character"},
		{"a\u0085b", "control character"},
		{" head", "leading space"},
		{"head ", "trailing space"},
		{"\u00a0head", "leading space"},
		{"head\u3000", "trailing space"},
		{"bad\xffutf8", "UTF-8"},
		{strings.Repeat("a", 65536), "more than 65535"},
	} {
		err := mqtt.CheckTopicPart(c.in)
		switch {
		case c.wantErr == "" && err != nil:
			t.Errorf("CheckTopicPart(%.20q) = %v, want nil", c.in, err)
		case c.wantErr != "" && err == nil:
			t.Errorf("CheckTopicPart(%.20q) = nil, want error with %q", c.in, c.wantErr)
		case c.wantErr != "" && !strings.Contains(err.Error(), c.wantErr):
			t.Errorf("CheckTopicPart(%.20q) = %v, want error with %q", c.in, err, c.wantErr)
		}
	}
}

func TestTopicsCheck(t *testing.T) {
	for _, c := range []struct {
		tp      mqtt.Topics
		wantErr string
	}{
		{mqtt.Topics{Root: "glowgate", Gateway: "gw1"}, ""},
		{mqtt.Topics{Root: "plant/area 4/glowgate", Gateway: "gw1"}, ""},
		{mqtt.Topics{Root: "", Gateway: "gw1"}, "root: empty"},
		{mqtt.Topics{Root: "$SYS", Gateway: "gw1"}, "'$'"},
		{mqtt.Topics{Root: "plant//glowgate", Gateway: "gw1"}, "level 2"},
		{mqtt.Topics{Root: "plant/", Gateway: "gw1"}, "level 2"},
		{mqtt.Topics{Root: "plant/+", Gateway: "gw1"}, "wildcard"},
		{mqtt.Topics{Root: "glowgate", Gateway: ""}, "gateway name"},
		{mqtt.Topics{Root: "glowgate", Gateway: "a/b"}, "gateway name"},
	} {
		err := c.tp.Check()
		switch {
		case c.wantErr == "" && err != nil:
			t.Errorf("%+v.Check() = %v, want nil", c.tp, err)
		case c.wantErr != "" && (err == nil || !strings.Contains(err.Error(), c.wantErr)):
			t.Errorf("%+v.Check() = %v, want error with %q", c.tp, err, c.wantErr)
		}
	}
}
