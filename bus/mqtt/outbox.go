package mqtt

import (
	"encoding/binary"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"sync"
	"time"
	"unicode/utf8"

	bolt "go.etcd.io/bbolt"
)

// EntryKind says what an outbox entry is, and so whether it may be dropped
// when the outbox is full.
type EntryKind uint8

const (
	// KindReading is a reading: when the outbox is full the oldest
	// readings are dropped, and a gap event names them.
	KindReading EntryKind = iota
	// KindEvent is an event (alarm transition, gap): never dropped.
	KindEvent
	// KindState is a retained state (alarm state): never dropped.
	KindState
)

func (k EntryKind) String() string {
	switch k {
	case KindReading:
		return "reading"
	case KindEvent:
		return "event"
	case KindState:
		return "state"
	}
	return "kind(" + strconv.Itoa(int(k)) + ")"
}

// Defaults of OutboxOptions fields left zero.
const (
	DefaultOutboxMaxEntries     = 1000000
	DefaultOutboxCommitInterval = 50 * time.Millisecond
)

// Bounds of the in-memory buffer of entries waiting for their commit. When
// it is full, Append waits for the commit under way.
const (
	maxPendingEntries = 8192
	maxPendingBytes   = 8 << 20
)

// ErrOutboxClosed is returned by Append and Sync after Close.
var ErrOutboxClosed = errors.New("outbox closed")

// OutboxOptions configure an Outbox. Zero values take the defaults named
// above.
type OutboxOptions struct {
	// MaxEntries bounds the entries held (default 1,000,000). When a
	// commit would leave more, the oldest readings go, and a gap event
	// takes one of the places; events and states are never dropped, so
	// that they alone may exceed the bound.
	MaxEntries int
	// CommitInterval is the longest an appended entry waits for its group
	// commit, which ends in an fsync (default 50 ms).
	CommitInterval time.Duration
	// GapTopic is where gap events go (the gateway's events topic); it is
	// required.
	GapTopic string
	// Gateway names the gateway in gap events; it is required.
	Gateway string
	// Logger receives commit failures and rate-limited drop reports; nil
	// discards them.
	Logger *slog.Logger
	// Now is the clock of append times and gap events (default time.Now).
	Now func() time.Time
}

// OutboxStats is a snapshot of an Outbox.
type OutboxStats struct {
	Depth     int           // entries held, committed or waiting for their commit
	Pending   int           // entries waiting for their commit
	OldestAge time.Duration // age of the oldest entry held, zero when empty
	Dropped   uint64        // readings dropped because the outbox was full, since OpenOutbox
	Committed uint64        // entries made durable since OpenOutbox, gap events included
	Commits   uint64        // group commits since OpenOutbox, each ending in an fsync
	Delivered uint64        // entries deleted on their PUBACK since OpenOutbox
	LastSeq   uint64        // last sequence number assigned
	Bytes     int64         // size of the outbox file
}

// Outbox is the gateway's durable queue of outgoing messages: a bbolt file
// that assigns the gateway sequence number and holds every entry until a
// broker has acknowledged it. It is safe for concurrent use.
//
// Append returns at once; a committer goroutine writes what was appended
// in group commits, at most CommitInterval apart, each ending in an fsync.
// Readings are handed to the Publisher once committed, so every reading a
// broker acknowledged had reached the disk first. Events and states (alarm
// annunciations) are also handed to it at once, beside their durable copy,
// so that an alarm does not wait for an fsync; their sequence numbers lie
// within a reservation that an earlier commit made durable. An entry is
// deleted only after its PUBACK: a crash may make a broker receive an
// entry twice, never lose one that was committed. Entries appended but not
// yet committed when the process dies are lost; the next run does not use
// their numbers again (some may have been seen) and says so with a gap
// event of reason "unclean_stop".
type Outbox struct {
	path string
	db   *bolt.DB
	o    OutboxOptions
	log  *slog.Logger

	work   chan struct{} // something to commit
	kick   chan struct{} // commit now: buffer full, Sync or Close
	notify chan struct{} // a commit made entries visible (to the publisher)
	early  chan entry    // events and states to send before their commit
	stop   chan struct{} // Close was called
	done   chan struct{} // the committer has exited

	// readMu keeps the publisher's reads and a commit that drops readings
	// apart: a read either ends before the drop is chosen (and its claims
	// are respected) or starts after the commit (and does not see them).
	readMu sync.RWMutex

	mu        sync.Mutex
	cond      *sync.Cond // signalled after each commit attempt
	closed    bool
	last      uint64  // last sequence number assigned
	reserved  uint64  // durable: numbers up to this may be sent before their commit
	pending   []entry // appended, waiting for their commit, in seq order
	spare     []entry // the buffer of the last commit, for reuse
	pendBytes int
	acks      []uint64          // acknowledged entries to delete at the next commit
	discards  []uint64          // unreadable entries to delete at the next commit
	claimed   map[uint64]bool   // entries handed to the publisher: true once acknowledged
	states    map[string]uint64 // topic of each state appended → the newest seq
	stored    int               // entries in the file
	watermark uint64            // every seq up to this is committed, deleted or dropped
	err       error             // error of the last commit attempt
	started   uint64            // commit attempts that took their batch
	finished  uint64            // commit attempts done, failed or not
	dropped   uint64
	committed uint64
	commits   uint64
	delivered uint64
	dropLog   limiter
	overLog   limiter
	errLog    limiter
}

// OpenOutbox opens the outbox in dir (creating dir and dir/outbox.db when
// missing) and starts its committer. A reopened outbox holds every entry
// committed and not yet acknowledged, and its sequence numbers continue
// after the last one committed: they never go back. A file that is not a
// glowgate outbox, a damaged one, or one held open by another process is
// refused with an error naming it.
func OpenOutbox(dir string, o OutboxOptions) (*Outbox, error) {
	if err := o.fill(); err != nil {
		return nil, fmt.Errorf("outbox: %w", err)
	}
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return nil, fmt.Errorf("outbox: %w", err)
	}
	path := filepath.Join(dir, OutboxFile)
	st, err := checkFile(path)
	if err != nil {
		return nil, fmt.Errorf("open outbox: %w", err)
	}
	db, err := openFile(path)
	if err != nil {
		return nil, fmt.Errorf("open outbox: %w", err)
	}
	lg := o.Logger
	if lg == nil {
		lg = slog.New(slog.DiscardHandler)
	}
	b := &Outbox{
		path:      path,
		db:        db,
		o:         o,
		log:       lg,
		work:      make(chan struct{}, 1),
		kick:      make(chan struct{}, 1),
		notify:    make(chan struct{}, 1),
		early:     make(chan entry, earlyEntries),
		stop:      make(chan struct{}),
		done:      make(chan struct{}),
		last:      st.reserved,
		reserved:  st.reserved,
		watermark: st.reserved,
		stored:    st.stored,
		claimed:   make(map[uint64]bool),
		states:    st.states,
		dropLog:   limiter{period: 10 * time.Second},
		overLog:   limiter{period: time.Minute},
		errLog:    limiter{period: time.Minute},
	}
	if b.states == nil {
		b.states = map[string]uint64{}
	}
	b.cond = sync.NewCond(&b.mu)
	if st.reserved > st.lastSeq {
		// The last run stopped without its final commit (killed, or the
		// machine lost power): numbers after the last committed one may
		// have reached subscribers in events sent before their commit.
		// They are not used again, and a gap event says so.
		from, to := st.lastSeq+1, st.reserved
		lg.Warn("outbox: the last run did not stop cleanly; entries appended after its last commit are lost",
			"path", path, "from_seq", from, "to_seq", to)
		b.pending = append(b.pending, b.gapEntry(from, to, int(to-from+1), "unclean_stop"))
		b.pendBytes = b.pending[0].encodedLen()
	}
	go b.committer()
	lg.Info("outbox opened", "path", path, "entries", st.stored, "last_seq", st.lastSeq)
	return b, nil
}

func (o *OutboxOptions) fill() error {
	switch {
	case o.MaxEntries < 0:
		return fmt.Errorf("max entries %d: negative", o.MaxEntries)
	case o.MaxEntries == 0:
		o.MaxEntries = DefaultOutboxMaxEntries
	}
	switch {
	case o.CommitInterval < 0:
		return fmt.Errorf("commit interval %v: negative", o.CommitInterval)
	case o.CommitInterval == 0:
		o.CommitInterval = DefaultOutboxCommitInterval
	}
	if err := checkPublishTopic(o.GapTopic); err != nil {
		return fmt.Errorf("gap topic: %w", err)
	}
	if o.Gateway == "" || !utf8.ValidString(o.Gateway) {
		return fmt.Errorf("gateway %q: empty or not valid UTF-8", o.Gateway)
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return nil
}

// Append assigns the next sequence number, calls payload with it to build
// the message, and queues the entry for the next group commit. It returns
// the sequence number at once: it never waits for the network, and waits
// for a commit only when the commit buffer (8192 entries or 8 MiB) is
// full. The entry reaches the Publisher once committed.
//
// payload is called with the outbox locked, so sequence numbers follow
// the order of appends: it must be quick and must not call the Outbox. The
// outbox keeps the slice it returns. A reading's payload should end with
// `"replayed":false}` as Reading.AppendJSON writes it, so that the
// Publisher can mark it replayed when it comes from the backlog.
//
// Append refuses a topic that cannot be published, an unknown kind and a
// payload too large for one MQTT packet; the sequence number is not used
// then.
func (b *Outbox) Append(kind EntryKind, topic string, retain bool, payload func(seq uint64) []byte) (uint64, error) {
	if kind > KindState {
		return 0, fmt.Errorf("outbox append: unknown kind %d", kind)
	}
	if err := checkPublishTopic(topic); err != nil {
		return 0, fmt.Errorf("outbox append: %w", err)
	}
	e, urgent, early, err := b.push(kind, topic, retain, payload)
	if err != nil {
		return 0, err
	}
	if early {
		select {
		case b.early <- e:
		default: // the publisher is away or behind: the entry goes when committed
		}
	}
	signal(b.work)
	// Events and states (alarm annunciations) are committed at once
	// rather than with the next group: an alarm must not wait up to a
	// commit interval to reach the operator.
	if urgent || kind != KindReading {
		signal(b.kick)
	}
	return e.seq, nil
}

// push numbers and queues one entry. early says that it may be sent before
// its commit: an event or state whose number is reserved.
func (b *Outbox) push(kind EntryKind, topic string, retain bool, payload func(uint64) []byte) (e entry, urgent, early bool, err error) {
	b.mu.Lock()
	defer b.mu.Unlock()
	for !b.closed && (len(b.pending) >= maxPendingEntries || b.pendBytes >= maxPendingBytes) {
		if b.err != nil {
			return entry{}, false, false, fmt.Errorf("outbox append: commit buffer full and the last commit failed: %w", b.err)
		}
		signal(b.kick)
		b.cond.Wait()
	}
	if b.closed {
		return entry{}, false, false, ErrOutboxClosed
	}
	seq := b.last + 1
	p := payload(seq)
	if len(p) > maxPacketRemaining-4-len(topic) {
		return entry{}, false, false, fmt.Errorf("outbox append: payload of %d bytes too large for one MQTT packet", len(p))
	}
	b.last = seq
	e = entry{seq: seq, kind: kind, retain: retain, at: b.o.Now().UnixNano(), topic: topic, payload: p}
	b.pending = append(b.pending, e)
	if kind == KindState {
		b.states[topic] = seq
	}
	b.pendBytes += e.encodedLen()
	urgent = len(b.pending) >= maxPendingEntries/2 || b.pendBytes >= maxPendingBytes/2
	return e, urgent, kind != KindReading && seq <= b.reserved, nil
}

// Sync commits at once what has been appended (and acknowledged) so far
// and waits until it is durable. It returns the error of a failed commit.
func (b *Outbox) Sync() error {
	b.mu.Lock()
	defer b.mu.Unlock()
	want := b.started // the commit under way, if any
	if len(b.pending) > 0 || len(b.acks) > 0 || len(b.discards) > 0 {
		want++ // and the next one
	}
	for b.finished < want {
		if b.closed {
			return ErrOutboxClosed
		}
		signal(b.kick)
		b.cond.Wait()
	}
	if b.err != nil {
		return fmt.Errorf("outbox sync: %w", b.err)
	}
	return nil
}

// Close commits what is pending, stops the committer and closes the file.
// The Publisher using the outbox must have stopped (its Run returned).
// Further calls return nil.
func (b *Outbox) Close() error {
	b.mu.Lock()
	if b.closed {
		b.mu.Unlock()
		return nil
	}
	b.closed = true
	b.cond.Broadcast()
	b.mu.Unlock()
	close(b.stop)
	<-b.done
	b.mu.Lock()
	cerr := b.err
	n := len(b.pending)
	b.mu.Unlock()
	if err := b.db.Close(); err != nil {
		return fmt.Errorf("close outbox %s: %w", b.path, err)
	}
	if cerr != nil {
		return fmt.Errorf("close outbox %s: final commit failed, %d entries lost: %w", b.path, n, cerr)
	}
	return nil
}

// Stats returns a snapshot of the outbox.
func (b *Outbox) Stats() OutboxStats {
	b.mu.Lock()
	st := OutboxStats{
		Depth:     b.stored + len(b.pending),
		Pending:   len(b.pending),
		Dropped:   b.dropped,
		Committed: b.committed,
		Commits:   b.commits,
		Delivered: b.delivered,
		LastSeq:   b.last,
	}
	var oldestPending int64
	if len(b.pending) > 0 {
		oldestPending = b.pending[0].at
	}
	closed := b.closed
	b.mu.Unlock()
	now := b.o.Now().UnixNano()
	oldest := oldestPending
	if !closed {
		_ = b.db.View(func(tx *bolt.Tx) error {
			for _, name := range [][]byte{bucketReadings, bucketKept} {
				if _, v := tx.Bucket(name).Cursor().First(); len(v) >= entryHeader {
					at := int64(binary.BigEndian.Uint64(v[2:10]))
					if oldest == 0 || at < oldest {
						oldest = at
					}
				}
			}
			return nil
		})
	}
	if oldest != 0 && now > oldest {
		st.OldestAge = time.Duration(now - oldest)
	}
	if fi, err := os.Stat(b.path); err == nil {
		st.Bytes = fi.Size()
	}
	return st
}

// signal makes a non-blocking send on a channel of capacity 1.
func signal(c chan struct{}) {
	select {
	case c <- struct{}{}:
	default:
	}
}

// committer writes group commits: when something waits, at most
// CommitInterval after the start of the previous commit, or at once when
// kicked. It makes a last commit when the outbox is closed.
func (b *Outbox) committer() {
	defer close(b.done)
	last := time.Now()
	timer := time.NewTimer(time.Hour)
	timer.Stop()
	for {
		select {
		case <-b.stop:
			b.commit(true)
			return
		case <-b.kick:
		case <-b.work:
			if wait := b.o.CommitInterval - time.Since(last); wait > 0 {
				timer.Reset(wait)
				select {
				case <-timer.C:
				case <-b.kick:
					timer.Stop()
				case <-b.stop:
					timer.Stop()
					b.commit(true)
					return
				}
			}
		}
		last = time.Now()
		if !b.commit(false) {
			signal(b.work) // try again after an interval
		}
	}
}

// reserveAhead is how many sequence numbers past the last committed one
// each commit reserves for events and states sent before their commit
// (see keyReservedSeq); at most this many go unused after an unclean stop.
const reserveAhead = 4096

// commit writes the pending entries, deletes the acknowledged ones and
// drops the oldest readings beyond MaxEntries, in one transaction, which
// also keeps the reservation of sequence numbers ahead of the last one:
// the final commit, when the outbox closes, gives back what is unused. It
// reports whether it succeeded (or had nothing to do).
func (b *Outbox) commit(final bool) bool {
	b.mu.Lock()
	if len(b.pending) == 0 && len(b.acks) == 0 && len(b.discards) == 0 && (!final || b.reserved == b.last) {
		b.mu.Unlock()
		return true
	}
	batch, acks, discards := b.pending, b.acks, b.discards
	b.pending, b.spare, b.acks, b.discards = b.spare[:0], nil, nil, nil
	b.pendBytes = 0
	b.started++
	b.mu.Unlock()

	var (
		inserted, deleted, discarded int
		dropped                      []uint64
		gap                          entry
		lastSeq, reserved            uint64
		readsHeld                    bool
	)
	// bbolt keeps the value slices until the transaction ends: each value
	// has its own bytes in arena (a reallocation leaves the earlier ones
	// in place).
	size := 0
	for i := range batch {
		size += batch[i].encodedLen()
	}
	arena := make([]byte, 0, size+1024)
	del := func(readings, kept *bolt.Bucket, seq uint64) (bool, error) {
		k := seqKey(seq)
		for _, bk := range []*bolt.Bucket{readings, kept} {
			if bk.Get(k) != nil {
				if err := bk.Delete(k); err != nil {
					return false, fmt.Errorf("delete entry %d: %w", seq, err)
				}
				return true, nil
			}
		}
		return false, nil
	}
	err := b.db.Update(func(tx *bolt.Tx) error {
		meta := tx.Bucket(bucketMeta)
		readings, kept := tx.Bucket(bucketReadings), tx.Bucket(bucketKept)
		// Keys only ever grow: full pages hold the most.
		readings.FillPercent, kept.FillPercent = 1, 1
		lastSeq = binary.BigEndian.Uint64(meta.Get(keyLastSeq))
		for i := range batch {
			e := &batch[i]
			start := len(arena)
			arena = e.encode(arena)
			if err := bucketFor(tx, e.kind).Put(seqKey(e.seq), arena[start:len(arena):len(arena)]); err != nil {
				return fmt.Errorf("put entry %d: %w", e.seq, err)
			}
			inserted++
			lastSeq = max(lastSeq, e.seq)
		}
		for _, seq := range acks {
			ok, err := del(readings, kept, seq)
			if err != nil {
				return err
			}
			if ok {
				deleted++
			}
		}
		for _, seq := range discards {
			ok, err := del(readings, kept, seq)
			if err != nil {
				return err
			}
			if ok {
				discarded++
			}
		}
		stored := b.storedCount() + inserted - deleted - discarded
		if excess := stored - b.o.MaxEntries; excess > 0 {
			b.readMu.Lock()
			readsHeld = true
			// One more, for the gap event.
			dropped = b.chooseDrops(readings, excess+1)
			for _, seq := range dropped {
				if err := readings.Delete(seqKey(seq)); err != nil {
					return fmt.Errorf("drop entry %d: %w", seq, err)
				}
			}
			if len(dropped) > 0 {
				gap = b.gapEntry(dropped[0], dropped[len(dropped)-1], len(dropped), "dropped")
				if err := kept.Put(seqKey(gap.seq), gap.encode(nil)); err != nil {
					return fmt.Errorf("put gap event %d: %w", gap.seq, err)
				}
				lastSeq = max(lastSeq, gap.seq)
			}
		}
		reserved = b.reserved
		switch {
		case final:
			reserved = lastSeq
		case lastSeq+reserveAhead/2 > reserved:
			reserved = lastSeq + reserveAhead
		}
		if err := meta.Put(keyReservedSeq, seqKey(reserved)); err != nil {
			return err
		}
		return meta.Put(keyLastSeq, seqKey(lastSeq))
	})
	if readsHeld {
		b.readMu.Unlock()
	}

	b.mu.Lock()
	defer b.mu.Unlock()
	b.finished++
	if err != nil {
		// Nothing was written: try again with everything at the next commit.
		b.pending = append(batch, b.pending...)
		b.pendBytes = 0
		for i := range b.pending {
			b.pendBytes += b.pending[i].encodedLen()
		}
		b.acks = append(acks, b.acks...)
		b.discards = append(discards, b.discards...)
		if gap.seq != 0 && gap.seq == b.last {
			b.last-- // the gap event's number, unused
		}
		b.err = fmt.Errorf("commit %s: %w", b.path, err)
		if logIt, held := b.errLog.allow(time.Now()); logIt {
			b.log.Error("outbox commit failed", "err", err, "pending", len(b.pending), "failures_since_last_report", held)
		}
		b.cond.Broadcast()
		return false
	}
	if b.err != nil {
		b.log.Info("outbox commits recovered", "failures", b.errLog.reset())
		b.err = nil
	}
	b.reserved = reserved
	b.stored += inserted - deleted - discarded - len(dropped)
	if gap.seq != 0 {
		b.stored++
		b.committed++
	}
	b.committed += uint64(inserted)
	b.commits++
	b.delivered += uint64(deleted)
	b.dropped += uint64(len(dropped))
	for _, seq := range acks {
		delete(b.claimed, seq)
	}
	for _, seq := range discards {
		delete(b.claimed, seq)
	}
	if len(b.pending) > 0 {
		b.watermark = b.pending[0].seq - 1
	} else {
		b.watermark = b.last
	}
	clear(batch)
	b.spare = batch[:0]
	b.cond.Broadcast()
	signal(b.notify)
	if len(dropped) > 0 {
		if logIt, held := b.dropLog.allow(time.Now()); logIt {
			b.log.Warn("outbox full, oldest readings dropped", "from", dropped[0], "to", dropped[len(dropped)-1],
				"count", len(dropped), "gap_event", gap.seq, "max_entries", b.o.MaxEntries, "drops_since_last_report", held)
		}
	}
	if over := b.stored - b.o.MaxEntries; over > 0 {
		if logIt, _ := b.overLog.allow(time.Now()); logIt {
			b.log.Warn("outbox above its bound with events and states only", "entries", b.stored, "max_entries", b.o.MaxEntries)
		}
	}
	return true
}

func (b *Outbox) storedCount() int {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.stored
}

// chooseDrops returns up to n of the oldest readings that are not in the
// publisher's hands. b.readMu is held, so no read claims more meanwhile.
func (b *Outbox) chooseDrops(readings *bolt.Bucket, n int) []uint64 {
	b.mu.Lock()
	defer b.mu.Unlock()
	var seqs []uint64
	c := readings.Cursor()
	for k, _ := c.First(); k != nil && len(seqs) < n; k, _ = c.Next() {
		seq := binary.BigEndian.Uint64(k)
		if _, busy := b.claimed[seq]; busy {
			continue
		}
		seqs = append(seqs, seq)
	}
	return seqs
}

// gapEntry builds a gap event, with the next sequence number:
//
//	{"type":"gap","gateway":G,"seq":S,"from":FROM,"to":TO,"count":N,"reason":R,"time":T}
//
// from and to are the first and last sequence numbers lost; count is how
// many of the numbers between them were lost (fewer than to-from+1 when
// events, states or readings in flight lay between). reason is "dropped"
// (the outbox was full) or "unclean_stop" (numbers after the last commit
// of a run that did not stop cleanly: entries appended but not committed,
// some of which may have been delivered). T is RFC 3339 UTC with
// milliseconds.
func (b *Outbox) gapEntry(from, to uint64, count int, reason string) entry {
	now := b.o.Now()
	p := append([]byte(nil), `{"type":"gap","gateway":`...)
	p = appendString(p, b.o.Gateway)
	b.mu.Lock()
	b.last++
	seq := b.last
	b.mu.Unlock()
	p = append(p, `,"seq":`...)
	p = strconv.AppendUint(p, seq, 10)
	p = append(p, `,"from":`...)
	p = strconv.AppendUint(p, from, 10)
	p = append(p, `,"to":`...)
	p = strconv.AppendUint(p, to, 10)
	p = append(p, `,"count":`...)
	p = strconv.AppendInt(p, int64(count), 10)
	p = append(p, `,"reason":`...)
	p = appendString(p, reason)
	p = append(p, `,"time":`...)
	p = appendTime(p, now)
	p = append(p, '}')
	return entry{seq: seq, kind: KindEvent, at: now.UnixNano(), topic: b.o.GapTopic, payload: p}
}

// The publisher's side. One Publisher drains an outbox; it reads committed
// entries by sequence number, claims them while they are in flight and
// acknowledges them on their PUBACK.

// lastAssigned is the last sequence number assigned: entries up to it are
// the backlog of a connection that comes up now.
func (b *Outbox) lastAssigned() uint64 {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.last
}

// visible is the sequence number up to which every entry is committed,
// deleted or dropped.
func (b *Outbox) visible() uint64 {
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.watermark
}

// read returns up to n committed entries with from <= seq <= to, in
// sequence order, claimed for the caller, and the sequence number to read
// from next. Entries that cannot be decoded are logged and deleted.
func (b *Outbox) read(from, to uint64, n int) ([]entry, uint64, error) {
	b.readMu.RLock()
	defer b.readMu.RUnlock()
	b.mu.Lock()
	if b.closed {
		b.mu.Unlock()
		return nil, from, ErrOutboxClosed
	}
	to = min(to, b.watermark)
	b.mu.Unlock()
	if from > to || n <= 0 {
		return nil, from, nil
	}
	var (
		es   []entry
		bad  []uint64
		next = to + 1
	)
	err := b.db.View(func(tx *bolt.Tx) error {
		es, bad = es[:0], bad[:0]
		next = to + 1
		rc, kc := tx.Bucket(bucketReadings).Cursor(), tx.Bucket(bucketKept).Cursor()
		start := seqKey(from)
		rk, rv := rc.Seek(start)
		kk, kv := kc.Seek(start)
		for len(es) < n {
			var k, v []byte
			switch {
			case rk == nil && kk == nil:
				return nil
			case kk == nil || (rk != nil && binary.BigEndian.Uint64(rk) < binary.BigEndian.Uint64(kk)):
				k, v = rk, rv
				rk, rv = rc.Next()
			default:
				k, v = kk, kv
				kk, kv = kc.Next()
			}
			seq := binary.BigEndian.Uint64(k)
			if seq > to {
				return nil
			}
			e, err := decodeEntry(k, v)
			if err != nil {
				bad = append(bad, seq)
				b.log.Error("outbox entry unreadable, deleted", "path", b.path, "err", err)
				continue
			}
			es = append(es, e)
			next = seq + 1
		}
		return nil
	})
	if err != nil {
		return nil, from, fmt.Errorf("read outbox %s: %w", b.path, err)
	}
	b.mu.Lock()
	kept := es[:0]
	for _, e := range es {
		if _, busy := b.claimed[e.seq]; busy {
			continue
		}
		b.claimed[e.seq] = false
		kept = append(kept, e)
	}
	for _, seq := range bad {
		b.claimed[seq] = true
		b.discards = append(b.discards, seq)
	}
	b.mu.Unlock()
	if len(bad) > 0 {
		signal(b.work)
	}
	return kept, next, nil
}

// ack schedules the deletion of seq, acknowledged by a broker, at the next
// commit.
func (b *Outbox) ack(seq uint64) {
	b.mu.Lock()
	if b.closed {
		b.mu.Unlock()
		return
	}
	b.claimed[seq] = true
	b.acks = append(b.acks, seq)
	b.mu.Unlock()
	signal(b.work)
}

// release gives back every claimed entry not acknowledged: the connection
// that carried them is gone.
func (b *Outbox) release() {
	b.mu.Lock()
	defer b.mu.Unlock()
	for seq, acked := range b.claimed {
		if !acked {
			delete(b.claimed, seq)
		}
	}
}

// earlyEntries is how many events and states wait to be sent before their
// commit; more go when committed.
const earlyEntries = 256

// superseded reports whether e is a state with a newer one appended for
// its topic: it is still delivered (its number must arrive) but not
// retained, lest it overwrite the newer state at the broker when it
// comes late, from the backlog.
func (b *Outbox) superseded(e *entry) bool {
	if e.kind != KindState {
		return false
	}
	b.mu.Lock()
	defer b.mu.Unlock()
	return b.states[e.topic] > e.seq
}

// dropEarly forgets the entries waiting to be sent before their commit.
func (b *Outbox) dropEarly() {
	for {
		select {
		case <-b.early:
		default:
			return
		}
	}
}

// claimEarly claims seq for sending before its commit, unless it is
// claimed already.
func (b *Outbox) claimEarly(seq uint64) bool {
	b.mu.Lock()
	defer b.mu.Unlock()
	if _, busy := b.claimed[seq]; busy || b.closed {
		return false
	}
	b.claimed[seq] = false
	return true
}

// committedSignal is signalled after each commit.
func (b *Outbox) committedSignal() <-chan struct{} { return b.notify }

// replayedFalse ends every Reading payload (Reading.AppendJSON writes the
// replayed field last).
var replayedFalse = []byte(`"replayed":false}`)

// markReplayed turns a reading payload ending in `"replayed":false}` into
// one ending in `"replayed":true}`, in place (one byte shorter), and
// returns it; any other payload is returned unchanged.
func markReplayed(p []byte) []byte {
	n := len(p)
	if n < len(replayedFalse) || string(p[n-len(replayedFalse):]) != string(replayedFalse) {
		return p
	}
	return append(p[:n-len(`false}`)], `true}`...)
}

// maxSeq is the largest sequence number.
const maxSeq = math.MaxUint64
