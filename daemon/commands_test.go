package daemon

import (
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"strings"
	"testing"
	"time"
)

// sign wraps a command object in its envelope, signed with secret
// (HMAC-SHA256, RFC 2104 as crypto/hmac implements it).
func sign(secret, cmd string) string {
	m := hmac.New(sha256.New, []byte(secret))
	m.Write([]byte(cmd))
	return fmt.Sprintf(`{"command":%s,"sig":"%s"}`, cmd, hex.EncodeToString(m.Sum(nil)))
}

// TestCommandGate: malformed, oversized, unsigned, badly signed, stale
// and replayed commands are refused with a message saying why; a good
// one passes once.
func TestCommandGate(t *testing.T) {
	const secret = "brackwater-cc2-command-secret"
	now := time.Date(2026, 12, 1, 22, 0, 0, 0, time.UTC)
	cmd := func(id, at string) string {
		return fmt.Sprintf(`{"id":"%s","action":"republish","by":"op-7","time":"%s"}`, id, at)
	}
	fresh := now.Add(-2 * time.Second).Format(time.RFC3339Nano)
	g := newCommandGate([]byte(secret), 30*time.Second)
	for _, tc := range []struct {
		name, msg, want string
	}{
		{"not json", `{"command":`, "malformed command message"},
		{"not an object", `[1,2]`, "malformed command message"},
		{"no command", `{"sig":"00"}`, `no "command" object`},
		{"unknown field", `{"command":{"id":"a","action":"republish","colour":"red"}}`, `unknown field "colour"`},
		{"trailing data", `{"command":{"id":"a","action":"republish"}} {}`, "trailing data"},
		{"oversized", `{"command":{"id":"a","action":"republish","by":"` + strings.Repeat("x", 5000) + `"}}`, "over the 4096-byte limit"},
		{"no id", `{"command":{"action":"republish"}}`, `"id" must be`},
		{"unknown action", `{"command":{"id":"a","action":"self_destruct"}}`, `unknown action "self_destruct"`},
		{"unsigned", `{"command":` + cmd("c1", fresh) + `}`, "unsigned command"},
		{"bad signature", sign("another-secret-of-16", cmd("c1", fresh)), "bad signature"},
		{"stale", sign(secret, cmd("c2", now.Add(-time.Minute).Format(time.RFC3339))), "outside the 30s replay window"},
		{"from the future", sign(secret, cmd("c3", now.Add(time.Minute).Format(time.RFC3339))), "outside the 30s replay window"},
		{"good", sign(secret, cmd("c4", fresh)), ""},
		{"replayed", sign(secret, cmd("c4", fresh)), "already received (replayed)"},
	} {
		_, err := g.parse([]byte(tc.msg), now)
		switch {
		case tc.want == "" && err != nil:
			t.Errorf("%s: %v", tc.name, err)
		case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
			t.Errorf("%s: error %v, want one saying %q", tc.name, err, tc.want)
		}
	}
	// Without a secret, commands need no signature.
	open := newCommandGate(nil, 30*time.Second)
	if _, err := open.parse([]byte(`{"command":`+cmd("c5", fresh)+`}`), now); err != nil {
		t.Errorf("unsigned command without a secret: %v", err)
	}
}

// FuzzCommandGate: no message makes the gate panic.
func FuzzCommandGate(f *testing.F) {
	f.Add([]byte(`{"command":{"id":"a","action":"republish","by":"x","time":"2026-12-01T22:00:00Z"},"sig":"00"}`))
	f.Add([]byte(`{"command":null}`))
	f.Add([]byte(`{}`))
	g := newCommandGate([]byte("0123456789abcdef"), 30*time.Second)
	now := time.Date(2026, 12, 1, 22, 0, 0, 0, time.UTC)
	f.Fuzz(func(t *testing.T, msg []byte) {
		g.parse(msg, now)
	})
}
