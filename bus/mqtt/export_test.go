package mqtt

import (
	"sync"
	"testing"
)

// HoldCommits keeps ob from committing until release is called, or tb
// ends: it holds the file's write transaction (waiting for a commit under
// way to end).
func HoldCommits(tb testing.TB, ob *Outbox) (release func()) {
	tb.Helper()
	tx, err := ob.db.Begin(true)
	if err != nil {
		tb.Fatal(err)
	}
	var once sync.Once
	release = func() {
		once.Do(func() {
			if err := tx.Rollback(); err != nil {
				tb.Error(err)
			}
		})
	}
	tb.Cleanup(release)
	return release
}
