package modbustest_test

import (
	"io"
	"os"
	"syscall"
	"testing"
	"time"

	"glowgate/bus/modbus/modbustest"
)

// openEnd opens one end of a pair with a read deadline.
func openEnd(t *testing.T, path string) *os.File {
	t.Helper()
	f, err := os.OpenFile(path, os.O_RDWR|syscall.O_NOCTTY, 0)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { f.Close() })
	if err := f.SetReadDeadline(time.Now().Add(5 * time.Second)); err != nil {
		t.Fatalf("read deadline on %s: %v", path, err)
	}
	return f
}

// roundTrip writes msg at one end and reads it at the other, both ways.
func roundTrip(t *testing.T, a, b string) {
	t.Helper()
	fa, fb := openEnd(t, a), openEnd(t, b)
	for _, dir := range []struct{ from, to *os.File }{{fa, fb}, {fb, fa}} {
		msg := []byte{0x01, 0x03, 0x00, 0x00, 0x00, 0x0A, 0xC5, 0xCD, 0x0A, 0x0D, 0x00}
		if _, err := dir.from.Write(msg); err != nil {
			t.Fatal(err)
		}
		got := make([]byte, len(msg))
		if _, err := io.ReadFull(dir.to, got); err != nil {
			t.Fatal(err)
		}
		// raw, echo=0: bytes pass unchanged, none echoed (no CR/LF
		// translation, NUL kept).
		if string(got) != string(msg) {
			t.Fatalf("read % X, wrote % X", got, msg)
		}
	}
}

func TestPtyPairRestart(t *testing.T) {
	a, b, restart := modbustest.StartPtyPair(t)
	roundTrip(t, a, b)
	restart()
	roundTrip(t, a, b)
}

func TestPtyPairStop(t *testing.T) {
	p := modbustest.NewPtyPair(t)
	f := openEnd(t, p.B)
	p.Stop()
	for _, end := range []string{p.A, p.B} {
		if _, err := os.Lstat(end); !os.IsNotExist(err) {
			t.Errorf("%s after Stop: %v, want it gone", end, err)
		}
	}
	// The end still open reads as a hung-up terminal.
	if _, err := f.Read(make([]byte, 1)); err == nil {
		t.Errorf("read from a stopped pair succeeded")
	}
	p.Stop() // again: nothing to do
	p.Start()
	roundTrip(t, p.A, p.B)
}
