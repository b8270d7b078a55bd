package mqtt

import (
	"bytes"
	"cmp"
	"context"
	"encoding/json"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	bolt "go.etcd.io/bbolt"
)

const (
	testGateway = "gw1"
	testEvents  = "glowgate/gw1/events"
	testReading = "glowgate/gw1/h1/reading"
	testState   = "glowgate/gw1/h1/alarm/high"
)

// logRecords collects log records for checks.
type logRecords struct {
	mu   sync.Mutex
	recs []slog.Record
}

func (l *logRecords) Enabled(context.Context, slog.Level) bool { return true }

func (l *logRecords) Handle(_ context.Context, r slog.Record) error {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.recs = append(l.recs, r.Clone())
	return nil
}

func (l *logRecords) WithAttrs([]slog.Attr) slog.Handler { return l }
func (l *logRecords) WithGroup(string) slog.Handler      { return l }

// find returns the messages of records at level whose message contains s.
func (l *logRecords) find(level slog.Level, s string) []string {
	l.mu.Lock()
	defer l.mu.Unlock()
	var out []string
	for _, r := range l.recs {
		if r.Level == level && strings.Contains(r.Message, s) {
			out = append(out, r.Message)
		}
	}
	return out
}

func openTest(t *testing.T, dir string, o OutboxOptions) *Outbox {
	t.Helper()
	if o.GapTopic == "" {
		o.GapTopic = testEvents
	}
	if o.Gateway == "" {
		o.Gateway = testGateway
	}
	b, err := OpenOutbox(dir, o)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = b.Close() })
	return b
}

func appendN(t *testing.T, b *Outbox, kind EntryKind, topic string, n int) []uint64 {
	t.Helper()
	var seqs []uint64
	for range n {
		seq, err := b.Append(kind, topic, kind == KindState, func(seq uint64) []byte {
			return []byte(fmt.Sprintf(`{"seq":%d,"kind":%q}`, seq, kind))
		})
		if err != nil {
			t.Fatal(err)
		}
		seqs = append(seqs, seq)
	}
	return seqs
}

// contents returns every committed entry in sequence order, claimed or not.
func contents(t *testing.T, b *Outbox) []entry {
	t.Helper()
	var es []entry
	err := b.db.View(func(tx *bolt.Tx) error {
		for _, name := range [][]byte{bucketReadings, bucketKept} {
			if err := tx.Bucket(name).ForEach(func(k, v []byte) error {
				e, err := decodeEntry(k, v)
				es = append(es, e)
				return err
			}); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	slices.SortFunc(es, func(a, b entry) int { return cmp.Compare(a.seq, b.seq) })
	return es
}

func seqsOf(es []entry) []uint64 {
	var s []uint64
	for _, e := range es {
		s = append(s, e.seq)
	}
	return s
}

func seqRange(from, to uint64) []uint64 {
	var s []uint64
	for i := from; i <= to; i++ {
		s = append(s, i)
	}
	return s
}

// Entries survive a close and reopen with their kind, topic, retain flag
// and payload; sequence numbers continue after the last one; entries
// acknowledged are gone after the next commit.
func TestOutboxResume(t *testing.T) {
	dir := t.TempDir()
	b := openTest(t, dir, OutboxOptions{})
	appendN(t, b, KindReading, testReading, 5)
	appendN(t, b, KindEvent, testEvents, 1)
	appendN(t, b, KindState, testState, 1)
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	if st := b.Stats(); st.Depth != 7 || st.Pending != 0 || st.LastSeq != 7 || st.Committed != 7 || st.Bytes == 0 {
		t.Fatalf("stats: %+v", st)
	}
	if err := b.Close(); err != nil {
		t.Fatal(err)
	}
	if err := b.Close(); err != nil {
		t.Fatalf("second Close: %v", err)
	}
	if _, err := b.Append(KindReading, testReading, false, func(uint64) []byte { return nil }); err != ErrOutboxClosed {
		t.Fatalf("Append after Close: %v", err)
	}

	b = openTest(t, dir, OutboxOptions{})
	if st := b.Stats(); st.Depth != 7 || st.LastSeq != 7 || st.Committed != 0 {
		t.Fatalf("reopened: %+v", st)
	}
	es := contents(t, b)
	if got := seqsOf(es); !reflect.DeepEqual(got, seqRange(1, 7)) {
		t.Fatalf("entries %v", got)
	}
	for _, e := range es {
		kind := KindReading
		switch {
		case e.seq == 6:
			kind = KindEvent
		case e.seq == 7:
			kind = KindState
		}
		want := fmt.Sprintf(`{"seq":%d,"kind":%q}`, e.seq, kind)
		if e.kind != kind || string(e.payload) != want || e.retain != (kind == KindState) {
			t.Errorf("entry %d: kind %v retain %v payload %s", e.seq, e.kind, e.retain, e.payload)
		}
	}
	if seqs := appendN(t, b, KindReading, testReading, 1); seqs[0] != 8 {
		t.Fatalf("first sequence number after reopening: %d, want 8", seqs[0])
	}
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	// Acknowledge 2, 6 and 7; they are deleted at the next commit.
	taken, _, err := b.read(1, maxSeq, 10)
	if err != nil || len(taken) != 8 {
		t.Fatalf("read: %d entries, %v", len(taken), err)
	}
	for _, seq := range []uint64{2, 6, 7} {
		b.ack(seq)
	}
	b.release()
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	if got := seqsOf(contents(t, b)); !reflect.DeepEqual(got, []uint64{1, 3, 4, 5, 8}) {
		t.Fatalf("after acknowledgements: %v", got)
	}
	if st := b.Stats(); st.Depth != 5 || st.Delivered != 3 {
		t.Fatalf("stats after acknowledgements: %+v", st)
	}
}

// Events and states may be sent before their commit, so their sequence
// numbers are reserved ahead in the file. A run that stops cleanly gives
// the unused ones back; one that does not (the file as a crash leaves it,
// taken here as a copy while the outbox runs) leaves them unused for
// good: the next run numbers after them and says so with a gap event.
func TestOutboxReservedNumbersAfterUncleanStop(t *testing.T) {
	dir, crashed := t.TempDir(), t.TempDir()
	b := openTest(t, dir, OutboxOptions{GapTopic: testEvents, Gateway: testGateway,
		Now: func() time.Time { return time.Date(2026, 12, 2, 1, 0, 0, 0, time.UTC) }})
	appendN(t, b, KindReading, testReading, 3)
	appendN(t, b, KindEvent, testEvents, 1)
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	b.mu.Lock()
	reserved := b.reserved
	b.mu.Unlock()
	if reserved != 4+reserveAhead {
		t.Fatalf("reserved through %d after a commit of 4, want %d", reserved, 4+reserveAhead)
	}
	image, err := os.ReadFile(filepath.Join(dir, OutboxFile))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(crashed, OutboxFile), image, 0o600); err != nil {
		t.Fatal(err)
	}
	if err := b.Close(); err != nil {
		t.Fatal(err)
	}

	// Clean stop: numbering goes on from 5.
	b = openTest(t, dir, OutboxOptions{})
	if seqs := appendN(t, b, KindReading, testReading, 1); seqs[0] != 5 {
		t.Errorf("first number after a clean stop: %d, want 5", seqs[0])
	}

	// Unclean stop: 5 … 4+reserveAhead are never used; the gap event
	// takes the next number and names them.
	var logs logRecords
	c := openTest(t, crashed, OutboxOptions{GapTopic: testEvents, Gateway: testGateway, Logger: slog.New(&logs),
		Now: func() time.Time { return time.Date(2026, 12, 2, 1, 0, 0, 0, time.UTC) }})
	if seqs := appendN(t, c, KindReading, testReading, 1); seqs[0] != reserved+2 {
		t.Errorf("first number after an unclean stop: %d, want %d", seqs[0], reserved+2)
	}
	if err := c.Sync(); err != nil {
		t.Fatal(err)
	}
	es := contents(t, c)
	gap := es[len(es)-2]
	want := fmt.Sprintf(`{"type":"gap","gateway":"gw1","seq":%d,"from":5,"to":%d,"count":%d,"reason":"unclean_stop","time":"2026-12-02T01:00:00.000Z"}`,
		reserved+1, reserved, reserveAhead)
	if gap.kind != KindEvent || gap.topic != testEvents || string(gap.payload) != want {
		t.Errorf("gap event: kind %v topic %s\n got %s\nwant %s", gap.kind, gap.topic, gap.payload, want)
	}
	if w := logs.find(slog.LevelWarn, "did not stop cleanly"); len(w) != 1 {
		t.Errorf("warnings %q, want one about the unclean stop", w)
	}
}

// Many appends in a burst share few commits: at most one per
// CommitInterval of the burst, plus the first and the one of Sync.
func TestOutboxGroupCommit(t *testing.T) {
	const interval = 50 * time.Millisecond
	b := openTest(t, t.TempDir(), OutboxOptions{CommitInterval: interval})
	r := Reading{Gateway: testGateway, Head: "h1", Unit: "degC", Quality: "good"}
	const n = 5000
	start := time.Now()
	for range n {
		if _, err := b.Append(KindReading, testReading, false, func(seq uint64) []byte {
			r.Seq = seq
			return r.AppendJSON(nil)
		}); err != nil {
			t.Fatal(err)
		}
	}
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	elapsed := time.Since(start)
	st := b.Stats()
	bound := uint64(elapsed/interval) + 2
	t.Logf("%d appends in %v: %d commits (bound %d)", n, elapsed, st.Commits, bound)
	if st.Committed != n || st.Commits > bound || st.Commits == 0 {
		t.Fatalf("stats %+v, want %d committed in at most %d commits", st, n, bound)
	}
}

// A full outbox drops its oldest readings, never events or states, and
// appends one gap event per commit naming the first and last sequence
// numbers dropped and their count. Readings in the publisher's hands are
// not dropped.
func TestOutboxDropOldestReadings(t *testing.T) {
	now := time.Date(2026, 12, 1, 22, 0, 0, 123456789, time.UTC)
	logs := new(logRecords)
	b := openTest(t, t.TempDir(), OutboxOptions{
		MaxEntries:     10,
		CommitInterval: time.Hour, // commits only on Sync
		Now:            func() time.Time { return now },
		Logger:         slog.New(logs),
	})
	appendN(t, b, KindReading, testReading, 3)  // 1..3
	appendN(t, b, KindEvent, testEvents, 1)     // 4
	appendN(t, b, KindReading, testReading, 11) // 5..15
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	// 15 entries, 10 allowed: 5 too many, and one place for the gap event.
	es := contents(t, b)
	if got, want := seqsOf(es), append([]uint64{4}, append(seqRange(8, 15), 16)...); !reflect.DeepEqual(got, want) {
		t.Fatalf("after the first overflow: %v, want %v", got, want)
	}
	gap := es[len(es)-1]
	wantGap := `{"type":"gap","gateway":"gw1","seq":16,"from":1,"to":7,"count":6,"reason":"dropped","time":"2026-12-01T22:00:00.123Z"}`
	if gap.kind != KindEvent || gap.topic != testEvents || gap.retain || string(gap.payload) != wantGap {
		t.Fatalf("gap event: kind %v topic %s retain %v\n got %s\nwant %s", gap.kind, gap.topic, gap.retain, gap.payload, wantGap)
	}
	if st := b.Stats(); st.Depth != 10 || st.Dropped != 6 || st.LastSeq != 16 {
		t.Fatalf("stats: %+v", st)
	}
	if len(logs.find(slog.LevelWarn, "oldest readings dropped")) != 1 {
		t.Error("no warning about the drop")
	}

	// The publisher holds 4 (event) and 8, 9 (readings): 8 and 9 stay.
	held, _, err := b.read(1, maxSeq, 3)
	if err != nil || !reflect.DeepEqual(seqsOf(held), []uint64{4, 8, 9}) {
		t.Fatalf("claimed %v, %v", seqsOf(held), err)
	}
	appendN(t, b, KindReading, testReading, 3) // 17..19
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	// 13 entries, 3 too many and one place for the gap event: the four
	// oldest unclaimed readings go, 10 to 13.
	es = contents(t, b)
	want := []uint64{4, 8, 9, 14, 15, 16, 17, 18, 19, 20}
	if got := seqsOf(es); !reflect.DeepEqual(got, want) {
		t.Fatalf("after the second overflow: %v, want %v", got, want)
	}
	var g struct {
		Type          string
		Seq, From, To uint64
		Count         int
		Gateway, Time string
	}
	if err := json.Unmarshal(es[len(es)-1].payload, &g); err != nil {
		t.Fatal(err)
	}
	if g.Type != "gap" || g.Seq != 20 || g.From != 10 || g.To != 13 || g.Count != 4 || g.Gateway != testGateway {
		t.Fatalf("second gap event %s", es[len(es)-1].payload)
	}
	if st := b.Stats(); st.Dropped != 10 || st.Depth != 10 {
		t.Fatalf("stats: %+v", st)
	}
}

// Events and states are never dropped, even beyond the bound; a reading
// appended then is dropped at once, and a gap event names it.
func TestOutboxEventsNeverDropped(t *testing.T) {
	logs := new(logRecords)
	b := openTest(t, t.TempDir(), OutboxOptions{MaxEntries: 3, CommitInterval: time.Hour, Logger: slog.New(logs)})
	appendN(t, b, KindEvent, testEvents, 5)
	appendN(t, b, KindState, testState, 1)
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	if st := b.Stats(); st.Depth != 6 || st.Dropped != 0 {
		t.Fatalf("stats: %+v", st)
	}
	if len(logs.find(slog.LevelWarn, "above its bound")) == 0 {
		t.Error("no warning about the bound")
	}
	appendN(t, b, KindReading, testReading, 1) // 7
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	es := contents(t, b)
	if got := seqsOf(es); !reflect.DeepEqual(got, []uint64{1, 2, 3, 4, 5, 6, 8}) {
		t.Fatalf("entries %v", got)
	}
	if !bytes.Contains(es[6].payload, []byte(`"from":7,"to":7,"count":1`)) {
		t.Fatalf("gap event %s", es[6].payload)
	}
}

// Readings are read in sequence order across kinds, bounded by the range
// asked and by the last commit; claimed entries are not read twice until
// released.
func TestOutboxRead(t *testing.T) {
	b := openTest(t, t.TempDir(), OutboxOptions{CommitInterval: time.Hour})
	appendN(t, b, KindReading, testReading, 2) // 1, 2
	appendN(t, b, KindState, testState, 1)     // 3
	appendN(t, b, KindReading, testReading, 1) // 4
	appendN(t, b, KindEvent, testEvents, 1)    // 5
	if es, next, err := b.read(1, maxSeq, 10); err != nil || len(es) != 0 || next != 1 {
		t.Fatalf("before the commit: %v, next %d, %v", seqsOf(es), next, err)
	}
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	appendN(t, b, KindReading, testReading, 1) // 6, not committed
	es, next, err := b.read(2, 4, 10)
	if err != nil || !reflect.DeepEqual(seqsOf(es), []uint64{2, 3, 4}) || next != 5 {
		t.Fatalf("read(2, 4): %v next %d, %v", seqsOf(es), next, err)
	}
	es, next, err = b.read(1, maxSeq, 2)
	if err != nil || !reflect.DeepEqual(seqsOf(es), []uint64{1}) || next != 3 {
		t.Fatalf("read(1, max, 2) with 2 claimed: %v next %d, %v", seqsOf(es), next, err)
	}
	es, next, err = b.read(5, maxSeq, 10)
	if err != nil || !reflect.DeepEqual(seqsOf(es), []uint64{5}) || next != 6 {
		t.Fatalf("read(5, max): %v next %d, %v (6 is not committed)", seqsOf(es), next, err)
	}
	b.release()
	if es := contents(t, b); !reflect.DeepEqual(seqsOf(es), seqRange(1, 5)) {
		t.Fatalf("after release: %v", seqsOf(es))
	}
}

// A backlog reading goes out with "replayed":true and nothing else
// changed; other payloads go out as stored.
func TestMarkReplayed(t *testing.T) {
	v := 1523.4
	r := Reading{Gateway: "gw1", Head: "h1", Seq: 42, Time: time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC),
		Temperature: &v, Unit: "degC", Quality: "good", Flags: []string{"nongrey"}}
	p := r.AppendJSON(nil)
	if !bytes.HasSuffix(p, []byte(`"replayed":false}`)) {
		t.Fatalf("AppendJSON no longer ends with the replayed field: %s", p)
	}
	got := markReplayed(p)
	r.Replayed = true
	if want := r.AppendJSON(nil); !bytes.Equal(got, want) {
		t.Fatalf("marked\n got %s\nwant %s", got, want)
	}
	var back map[string]any
	if err := json.Unmarshal(got, &back); err != nil || back["replayed"] != true {
		t.Fatalf("unmarshal %s: %v, %v", got, back, err)
	}
	for _, s := range []string{`{"type":"alarm"}`, `false}`, ``, `{"replayed":true}`} {
		if out := markReplayed([]byte(s)); string(out) != s {
			t.Errorf("markReplayed(%q) = %q, want it unchanged", s, out)
		}
	}
}

func TestOutboxOptionsAndAppendErrors(t *testing.T) {
	dir := t.TempDir()
	for _, c := range []struct {
		o    OutboxOptions
		want string
	}{
		{OutboxOptions{Gateway: "g"}, "gap topic: empty topic"},
		{OutboxOptions{Gateway: "g", GapTopic: "a/+/b"}, "gap topic"},
		{OutboxOptions{GapTopic: testEvents}, "gateway"},
		{OutboxOptions{Gateway: "g", GapTopic: testEvents, MaxEntries: -1}, "max entries -1"},
		{OutboxOptions{Gateway: "g", GapTopic: testEvents, CommitInterval: -time.Second}, "commit interval"},
	} {
		if _, err := OpenOutbox(dir, c.o); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%+v: error %v, want %q", c.o, err, c.want)
		}
	}
	b := openTest(t, dir, OutboxOptions{})
	p := func(uint64) []byte { return []byte("x") }
	for _, c := range []struct {
		kind  EntryKind
		topic string
		want  string
	}{
		{KindReading, "", "empty topic"},
		{KindReading, "a/#", "wildcard"},
		{EntryKind(7), "a", "unknown kind 7"},
	} {
		if _, err := b.Append(c.kind, c.topic, false, p); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("Append(%v, %q): %v, want %q", c.kind, c.topic, err, c.want)
		}
	}
	if _, err := b.Append(KindReading, "a", false, func(uint64) []byte { return make([]byte, maxPacketRemaining) }); err == nil ||
		!strings.Contains(err.Error(), "too large") {
		t.Errorf("oversized payload: %v", err)
	}
	if seq, err := b.Append(KindReading, "a", false, p); err != nil || seq != 1 {
		t.Errorf("after refusals: seq %d, %v; want 1 (refusals use no number)", seq, err)
	}
}

// Files that are not an outbox, damaged ones and one in use are refused
// with an error naming the file; none panics.
func TestOutboxFileErrors(t *testing.T) {
	// A valid outbox with enough entries for several pages, as a base.
	base := t.TempDir()
	b := openTest(t, base, OutboxOptions{})
	appendN(t, b, KindReading, testReading, 3000)
	appendN(t, b, KindEvent, testEvents, 10)
	if err := b.Close(); err != nil {
		t.Fatal(err)
	}
	good, err := os.ReadFile(filepath.Join(base, OutboxFile))
	if err != nil {
		t.Fatal(err)
	}
	const page = 4096
	if len(good) < 20*page {
		t.Fatalf("base file of %d bytes: too small for the cases below", len(good))
	}

	cases := []struct {
		name string
		make func(path string)
		want string
	}{
		{"text", func(p string) { write(t, p, bytes.Repeat([]byte("not a database\n"), 1000)) }, "not an outbox file, or damaged"},
		{"truncated", func(p string) { write(t, p, good[:len(good)/3]) }, "damaged"},
		{"garbage pages", func(p string) {
			bad := bytes.Clone(good)
			for i := 2 * page; i < len(bad); i++ {
				bad[i] = byte(i*7 + 3)
			}
			write(t, p, bad)
		}, "damaged"},
		{"zeroed pages", func(p string) {
			bad := bytes.Clone(good)
			clear(bad[2*page:])
			write(t, p, bad)
		}, "damaged"},
		{"foreign", func(p string) {
			db, err := bolt.Open(p, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := db.Update(func(tx *bolt.Tx) error {
				_, err := tx.CreateBucket([]byte("users"))
				return err
			}); err != nil {
				t.Fatal(err)
			}
			_ = db.Close()
		}, `not a glowgate outbox: it holds bucket "users"`},
		{"other format", func(p string) {
			write(t, p, good)
			db, err := bolt.Open(p, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := db.Update(func(tx *bolt.Tx) error {
				return tx.Bucket(bucketMeta).Put(keyFormat, []byte("glowgate outbox 9"))
			}); err != nil {
				t.Fatal(err)
			}
			_ = db.Close()
		}, `outbox format "glowgate outbox 9"`},
		{"reserved below the last", func(p string) {
			write(t, p, good)
			db, err := bolt.Open(p, 0o600, nil)
			if err != nil {
				t.Fatal(err)
			}
			if err := db.Update(func(tx *bolt.Tx) error {
				return tx.Bucket(bucketMeta).Put(keyReservedSeq, seqKey(5))
			}); err != nil {
				t.Fatal(err)
			}
			_ = db.Close()
		}, "reserved sequence number 5 below the last, 3010"},
		{"directory", func(p string) {
			if err := os.Mkdir(p, 0o700); err != nil {
				t.Fatal(err)
			}
		}, "not a regular file"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			path := filepath.Join(dir, OutboxFile)
			c.make(path)
			b, err := OpenOutbox(dir, OutboxOptions{GapTopic: testEvents, Gateway: testGateway})
			if err == nil {
				_ = b.Close()
				t.Fatal("opened")
			}
			if !strings.Contains(err.Error(), path) || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %q, want the path and %q", err, c.want)
			}
			t.Log(err)
		})
	}

	t.Run("in use", func(t *testing.T) {
		dir := t.TempDir()
		openTest(t, dir, OutboxOptions{})
		_, err := OpenOutbox(dir, OutboxOptions{GapTopic: testEvents, Gateway: testGateway})
		if err == nil || !strings.Contains(err.Error(), "in use by another process") {
			t.Fatalf("second open: %v", err)
		}
	})
}

func write(t *testing.T, path string, data []byte) {
	t.Helper()
	if err := os.WriteFile(path, data, 0o600); err != nil {
		t.Fatal(err)
	}
}

// A commit that fails keeps its entries pending and says so: Sync and
// Close return the error, naming the file, and the failure is logged.
func TestOutboxCommitFailure(t *testing.T) {
	logs := new(logRecords)
	b := openTest(t, t.TempDir(), OutboxOptions{Logger: slog.New(logs)})
	appendN(t, b, KindReading, testReading, 3)
	if err := b.Sync(); err != nil {
		t.Fatal(err)
	}
	// The file goes away under the outbox, as a failing disk would.
	if err := b.db.Close(); err != nil {
		t.Fatal(err)
	}
	appendN(t, b, KindReading, testReading, 2)
	err := b.Sync()
	if err == nil || !strings.Contains(err.Error(), b.path) || !strings.Contains(err.Error(), "database not open") {
		t.Fatalf("Sync after a failed commit: %v", err)
	}
	if st := b.Stats(); st.Pending != 2 || st.Committed != 3 || st.LastSeq != 5 {
		t.Fatalf("stats: %+v", st)
	}
	if len(logs.find(slog.LevelError, "outbox commit failed")) == 0 {
		t.Error("no error logged")
	}
	if err := b.Close(); err == nil || !strings.Contains(err.Error(), "2 entries lost") {
		t.Fatalf("Close: %v", err)
	}
}
