package daemon

import (
	"bytes"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"strings"
	"sync"
	"time"

	"glowgate/bus/mqtt"
)

// The command protocol on <root>/<gateway>/cmd. A message is one JSON
// object:
//
//	{"command": {"id": "c-1842", "action": "republish", "by": "op-7",
//	             "time": "2026-12-01T22:00:00.000Z", ...},
//	 "sig": "<hex HMAC-SHA256 of the exact bytes of the command object>"}
//
// "sig" is required when the configuration has a command secret, and
// then "time" must lie within the replay window of the gateway's clock
// and "id" must not have been seen within it. Unknown fields, a wrong
// type, a missing field or a message over maxCommandSize are errors. Each
// command is answered on <root>/<gateway>/cmd/reply:
//
//	{"id": "c-1842", "ok": true, "time": "..."}
//	{"id": "c-1842", "ok": false, "error": "...", "time": "..."}
const maxCommandSize = 4096

// command is one operator command.
type command struct {
	ID     string `json:"id"`
	Action string `json:"action"`
	By     string `json:"by"`
	Time   string `json:"time"`
	Head   string `json:"head,omitempty"`
	Alarm  string `json:"alarm,omitempty"`
	Until  string `json:"until,omitempty"` // shelve: RFC 3339
}

type envelope struct {
	Command json.RawMessage `json:"command"`
	Sig     string          `json:"sig"`
}

// commandReply is the answer on cmd/reply.
type commandReply struct {
	ID    string `json:"id"`
	OK    bool   `json:"ok"`
	Error string `json:"error,omitempty"`
	Time  string `json:"time"`
}

// actions are the commands glowgate knows, with the fields each needs.
var actions = map[string][]string{
	"republish":   nil,
	"acknowledge": {"head", "alarm"},
	"shelve":      {"head", "alarm", "until"},
	"unshelve":    {"head", "alarm"},
}

// commandGate checks commands: their shape, their signature and that
// they are fresh and not replayed.
type commandGate struct {
	secret []byte
	window time.Duration

	mu   sync.Mutex
	seen map[string]time.Time // ids of signed commands within the window
}

func newCommandGate(secret []byte, window time.Duration) *commandGate {
	return &commandGate{secret: secret, window: window, seen: map[string]time.Time{}}
}

// parse validates a command message received at now.
func (g *commandGate) parse(msg []byte, now time.Time) (command, error) {
	var c command
	if len(msg) > maxCommandSize {
		return c, fmt.Errorf("command of %d bytes is over the %d-byte limit", len(msg), maxCommandSize)
	}
	var env envelope
	if err := strictDecode(msg, &env); err != nil {
		return c, fmt.Errorf("malformed command message: %v", err)
	}
	if len(env.Command) == 0 {
		return c, errors.New(`malformed command message: no "command" object`)
	}
	if err := strictDecode(env.Command, &c); err != nil {
		return c, fmt.Errorf("malformed command: %v", err)
	}
	if c.ID == "" || len(c.ID) > 64 {
		return c, errors.New(`"id" must be 1 to 64 characters`)
	}
	need, ok := actions[c.Action]
	if !ok {
		return c, fmt.Errorf("unknown action %q (want %s)", c.Action, strings.Join(actionNames(), ", "))
	}
	for _, field := range need {
		if (field == "head" && c.Head == "") || (field == "alarm" && c.Alarm == "") || (field == "until" && c.Until == "") {
			return c, fmt.Errorf("action %s needs %q", c.Action, field)
		}
	}
	if g.secret == nil {
		return c, nil
	}
	if env.Sig == "" {
		return c, errors.New(`unsigned command (this gateway wants "sig", an HMAC-SHA256 of the command object)`)
	}
	want := hmac.New(sha256.New, g.secret)
	want.Write(env.Command)
	got, err := hex.DecodeString(env.Sig)
	if err != nil || !hmac.Equal(got, want.Sum(nil)) {
		return c, errors.New("bad signature")
	}
	at, err := time.Parse(time.RFC3339Nano, c.Time)
	if err != nil {
		return c, fmt.Errorf(`"time" %q is not RFC 3339`, c.Time)
	}
	if d := now.Sub(at); d > g.window || d < -g.window {
		return c, fmt.Errorf("command time %s is outside the %s replay window", c.Time, g.window)
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	for id, t := range g.seen {
		if now.Sub(t) > 2*g.window {
			delete(g.seen, id)
		}
	}
	if _, dup := g.seen[c.ID]; dup {
		return c, fmt.Errorf("command %s was already received (replayed)", c.ID)
	}
	g.seen[c.ID] = now
	return c, nil
}

func actionNames() []string {
	names := make([]string, 0, len(actions))
	for a := range actions {
		names = append(names, a)
	}
	return names
}

// strictDecode decodes one JSON value into v, refusing unknown fields and
// trailing data.
func strictDecode(b []byte, v any) error {
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return err
	}
	if dec.More() {
		return errors.New("trailing data after the object")
	}
	return nil
}

// onCommand handles one command message: validates it, carries it out
// and answers on cmd/reply. Nothing a command says can stop the daemon.
func (d *Daemon) onCommand(payload []byte) {
	now := d.now()
	d.mu.Lock()
	gate, pub, cfg := d.gate, d.pub, d.cfg
	d.mu.Unlock()
	if gate == nil || pub == nil {
		return
	}
	c, err := gate.parse(payload, now)
	if err == nil {
		err = d.execute(c)
	}
	reply := commandReply{ID: c.ID, OK: err == nil, Time: now.UTC().Format(mqtt.TimeLayout)}
	if err != nil {
		reply.Error = err.Error()
		d.log.Warn("command refused", "id", c.ID, "action", c.Action, "by", c.By, "err", err)
	} else {
		d.log.Info("command carried out", "id", c.ID, "action", c.Action, "by", c.By)
	}
	b, _ := json.Marshal(reply)
	pub.Publish(mqtt.Message{Topic: mqttTopics(cfg).CmdReply(), Payload: b})
}

// execute carries out a valid command.
func (d *Daemon) execute(c command) error {
	switch c.Action {
	case "republish":
		d.mu.Lock()
		pub := d.pub
		d.mu.Unlock()
		pub.Publish(mqtt.Message{Topic: mqttTopics(d.config()).State(), Payload: []byte("online"), Retain: true})
		for _, m := range d.infoMessages() {
			pub.Publish(m)
		}
		d.publishAllAlarmStates()
		return nil
	case "acknowledge", "unshelve":
		return d.alarmAction(c.Action, c.Head, c.Alarm, c.By, time.Time{})
	case "shelve":
		until, err := time.Parse(time.RFC3339Nano, c.Until)
		if err != nil {
			return fmt.Errorf(`"until" %q is not RFC 3339`, c.Until)
		}
		return d.alarmAction(c.Action, c.Head, c.Alarm, c.By, until)
	}
	return fmt.Errorf("action %q is not carried out by this gateway", c.Action)
}
