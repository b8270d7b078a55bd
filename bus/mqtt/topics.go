package mqtt

import (
	"errors"
	"fmt"
	"strings"
	"unicode"
	"unicode/utf8"
)

// maxTopicLen is the longest topic MQTT 3.1.1 can carry: a UTF-8 string
// is prefixed by a two-byte length (MQTT 3.1.1 section 1.5.3).
const maxTopicLen = 65535

// Topics builds the topic tree under <root>/<gateway>:
//
//	<root>/<gateway>/state                    retained online/offline, also the Will
//	<root>/<gateway>/<head>/reading           one Reading per acquisition
//	<root>/<gateway>/<head>/info              retained head description
//	<root>/<gateway>/<head>/alarm/<alarm>     retained current alarm state
//	<root>/<gateway>/events                   alarm transitions and gaps
//	<root>/<gateway>/cmd                      incoming commands
//	<root>/<gateway>/cmd/reply                replies to commands
//
// Root may hold several levels ("plant/glowgate"); Gateway, head and alarm
// names are single levels. The methods join strings without checking them:
// call Check once for Root and Gateway, and CheckTopicPart for each head and
// alarm name when the configuration is read.
type Topics struct {
	Root    string
	Gateway string
}

func (t Topics) base() string { return t.Root + "/" + t.Gateway }

// State is <root>/<gateway>/state.
func (t Topics) State() string { return t.base() + "/state" }

// Reading is <root>/<gateway>/<head>/reading.
func (t Topics) Reading(head string) string { return t.base() + "/" + head + "/reading" }

// Info is <root>/<gateway>/<head>/info.
func (t Topics) Info(head string) string { return t.base() + "/" + head + "/info" }

// Events is <root>/<gateway>/events.
func (t Topics) Events() string { return t.base() + "/events" }

// Alarm is <root>/<gateway>/<head>/alarm/<alarm>.
func (t Topics) Alarm(head, alarm string) string {
	return t.base() + "/" + head + "/alarm/" + alarm
}

// Cmd is <root>/<gateway>/cmd.
func (t Topics) Cmd() string { return t.base() + "/cmd" }

// CmdReply is <root>/<gateway>/cmd/reply.
func (t Topics) CmdReply() string { return t.base() + "/cmd/reply" }

// Check reports whether Root and Gateway make a usable topic prefix: every
// level of Root and the Gateway pass CheckTopicPart, and Root does not start
// with '$' (brokers reserve such topics, MQTT 3.1.1 section 4.7.2).
func (t Topics) Check() error {
	if t.Root == "" {
		return errors.New("topic root: empty")
	}
	if strings.HasPrefix(t.Root, "$") {
		return fmt.Errorf("topic root %q: starts with '$', which brokers reserve", t.Root)
	}
	for i, level := range strings.Split(t.Root, "/") {
		if err := CheckTopicPart(level); err != nil {
			return fmt.Errorf("topic root %q level %d: %w", t.Root, i+1, err)
		}
	}
	if err := CheckTopicPart(t.Gateway); err != nil {
		return fmt.Errorf("gateway name: %w", err)
	}
	return nil
}

// CheckTopicPart reports whether s can stand as one level of a topic: not
// empty, valid UTF-8, no '/', '+', '#' or NUL (MQTT 3.1.1 sections 1.5.3 and
// 4.7.1), no other control character, and no leading or trailing white space
// (legal in MQTT, but a frequent source of topics that look equal and are
// not).
func CheckTopicPart(s string) error {
	switch {
	case s == "":
		return errors.New("topic part: empty")
	case !utf8.ValidString(s):
		return fmt.Errorf("topic part %q: not valid UTF-8", s)
	case len(s) > maxTopicLen:
		return fmt.Errorf("topic part: %d bytes, more than %d", len(s), maxTopicLen)
	}
	for i, r := range s {
		switch {
		case r == '/':
			return fmt.Errorf("topic part %q: '/' at byte %d (a part is a single level)", s, i)
		case r == '+' || r == '#':
			return fmt.Errorf("topic part %q: wildcard %q at byte %d", s, r, i)
		case r == 0:
			return fmt.Errorf("topic part %q: NUL at byte %d", s, i)
		case r < 0x20 || r == 0x7f || (r >= 0x80 && r <= 0x9f):
			return fmt.Errorf("topic part %q: control character %U at byte %d", s, r, i)
		}
	}
	if first, _ := utf8.DecodeRuneInString(s); unicode.IsSpace(first) {
		return fmt.Errorf("topic part %q: leading space", s)
	}
	if last, _ := utf8.DecodeLastRuneInString(s); unicode.IsSpace(last) {
		return fmt.Errorf("topic part %q: trailing space", s)
	}
	return nil
}

// checkPublishTopic reports whether topic can be published to: not empty,
// valid UTF-8, no wildcard or NUL, at most 65535 bytes. A broker closes the
// connection of a client that publishes to anything else, so such a message
// would block the queue forever.
func checkPublishTopic(topic string) error {
	switch {
	case topic == "":
		return errors.New("empty topic")
	case len(topic) > maxTopicLen:
		return fmt.Errorf("topic of %d bytes, more than %d", len(topic), maxTopicLen)
	case !utf8.ValidString(topic):
		return fmt.Errorf("topic %q: not valid UTF-8", topic)
	case strings.ContainsAny(topic, "+#\x00"):
		return fmt.Errorf("topic %q: holds a wildcard or NUL", topic)
	}
	return nil
}
