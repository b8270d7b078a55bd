package mqtt

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"runtime/debug"
	"time"

	bolt "go.etcd.io/bbolt"
	berrors "go.etcd.io/bbolt/errors"
)

// The outbox file is a bbolt database with three top-level buckets:
//
//	meta      "format"   -> outboxFormat
//	          "last-seq" -> the last sequence number committed, 8 bytes big-endian
//	readings  seq (8 bytes big-endian) -> entry of kind KindReading
//	kept      seq (8 bytes big-endian) -> entry of kind KindEvent or KindState
//
// Readings live apart from the entries that are never dropped, so that the
// oldest readings are the first keys of their bucket. An entry value is
//
//	kind (1 byte) | flags (1 byte, bit 0: retain) | append time (8 bytes,
//	Unix nanoseconds, big-endian) | topic length (uvarint) | topic | payload
var (
	bucketMeta     = []byte("meta")
	bucketReadings = []byte("readings")
	bucketKept     = []byte("kept")
	keyFormat      = []byte("format")
	keyLastSeq     = []byte("last-seq")
	// keyReservedSeq: sequence numbers up to this may have been sent
	// before their commit (events and states, Outbox.Append); a run that
	// stops cleanly sets it back to the last one. Absent in files of
	// earlier versions: read as the last sequence number.
	keyReservedSeq = []byte("reserved-seq")
)

// outboxFormat names the layout above; a file holding another value is not
// opened.
const outboxFormat = "glowgate outbox 1"

// OutboxFile is the name of the outbox database inside its directory.
const OutboxFile = "outbox.db"

// lockTimeout bounds the wait for the file lock a running process holds.
const lockTimeout = 500 * time.Millisecond

// entryHeader is the length of an entry value before the topic length.
const entryHeader = 10

const flagRetain = 1

// entry is one outbox entry, in memory.
type entry struct {
	seq     uint64
	kind    EntryKind
	retain  bool
	at      int64 // append time, Unix nanoseconds
	topic   string
	payload []byte
}

func seqKey(seq uint64) []byte {
	var k [8]byte
	binary.BigEndian.PutUint64(k[:], seq)
	return k[:]
}

// encode appends e's value to dst.
func (e *entry) encode(dst []byte) []byte {
	var flags byte
	if e.retain {
		flags |= flagRetain
	}
	dst = append(dst, byte(e.kind), flags)
	dst = binary.BigEndian.AppendUint64(dst, uint64(e.at))
	dst = binary.AppendUvarint(dst, uint64(len(e.topic)))
	dst = append(dst, e.topic...)
	return append(dst, e.payload...)
}

func (e *entry) encodedLen() int {
	return entryHeader + binary.MaxVarintLen64 + len(e.topic) + len(e.payload)
}

// decodeEntry decodes the value v stored under key k. The payload is
// copied: bbolt's bytes are valid only inside their transaction.
func decodeEntry(k, v []byte) (entry, error) {
	var e entry
	if len(k) != 8 {
		return e, fmt.Errorf("key %x: %d bytes, want 8", k, len(k))
	}
	e.seq = binary.BigEndian.Uint64(k)
	if len(v) < entryHeader+1 {
		return e, fmt.Errorf("entry %d: %d bytes, too short", e.seq, len(v))
	}
	e.kind = EntryKind(v[0])
	if e.kind > KindState {
		return e, fmt.Errorf("entry %d: unknown kind %d", e.seq, v[0])
	}
	if v[1]&^flagRetain != 0 {
		return e, fmt.Errorf("entry %d: unknown flags %#x", e.seq, v[1])
	}
	e.retain = v[1]&flagRetain != 0
	e.at = int64(binary.BigEndian.Uint64(v[2:10]))
	n, w := binary.Uvarint(v[entryHeader:])
	rest := v[entryHeader+max(w, 0):]
	if w <= 0 || n == 0 || n > uint64(len(rest)) {
		return e, fmt.Errorf("entry %d: bad topic length", e.seq)
	}
	e.topic = string(rest[:n])
	if err := checkPublishTopic(e.topic); err != nil {
		return e, fmt.Errorf("entry %d: %w", e.seq, err)
	}
	e.payload = bytes.Clone(rest[n:])
	if e.payload == nil {
		e.payload = []byte{}
	}
	return e, nil
}

// bucketFor returns the bucket that holds entries of kind k.
func bucketFor(tx *bolt.Tx, k EntryKind) *bolt.Bucket {
	if k == KindReading {
		return tx.Bucket(bucketReadings)
	}
	return tx.Bucket(bucketKept)
}

// fileState is what opening learns from the file.
type fileState struct {
	lastSeq  uint64
	reserved uint64 // ≥ lastSeq
	stored   int
	states   map[string]uint64 // topic of each retained state held → its newest seq
}

// checkFile opens path read-only and walks every entry, so that a damaged
// or foreign file is refused with an error here rather than found by bbolt
// later, where some kinds of damage panic on goroutines of its own. The
// walk recovers panics and memory faults of the mapped file.
func checkFile(path string) (st fileState, err error) {
	fi, err := os.Stat(path)
	if errors.Is(err, os.ErrNotExist) {
		return st, nil
	}
	if err != nil {
		return st, err
	}
	if !fi.Mode().IsRegular() {
		return st, fmt.Errorf("%s: not a regular file", path)
	}
	if fi.Size() == 0 {
		return st, nil // bbolt initialises an empty file
	}
	db, err := bolt.Open(path, 0o600, &bolt.Options{ReadOnly: true, Timeout: lockTimeout})
	if err != nil {
		return st, openError(path, err)
	}
	defer db.Close()
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("%s: damaged outbox file: %v", path, r)
		}
	}()
	defer debug.SetPanicOnFault(debug.SetPanicOnFault(true))
	err = db.View(func(tx *bolt.Tx) error {
		var fresh = true
		if err := tx.ForEach(func(name []byte, _ *bolt.Bucket) error {
			fresh = false
			switch {
			case bytes.Equal(name, bucketMeta), bytes.Equal(name, bucketReadings), bytes.Equal(name, bucketKept):
				return nil
			}
			return fmt.Errorf("%s: not a glowgate outbox: it holds bucket %q", path, name)
		}); err != nil {
			return err
		}
		if fresh {
			return nil
		}
		meta := tx.Bucket(bucketMeta)
		if meta == nil {
			return fmt.Errorf("%s: not a glowgate outbox: no %q bucket", path, bucketMeta)
		}
		if f := meta.Get(keyFormat); string(f) != outboxFormat {
			return fmt.Errorf("%s: outbox format %q, want %q", path, f, outboxFormat)
		}
		ls := meta.Get(keyLastSeq)
		if len(ls) != 8 {
			return fmt.Errorf("%s: damaged outbox file: last sequence number of %d bytes", path, len(ls))
		}
		st.lastSeq = binary.BigEndian.Uint64(ls)
		st.reserved = st.lastSeq
		if rs := meta.Get(keyReservedSeq); rs != nil {
			if len(rs) != 8 {
				return fmt.Errorf("%s: damaged outbox file: reserved sequence number of %d bytes", path, len(rs))
			}
			if st.reserved = binary.BigEndian.Uint64(rs); st.reserved < st.lastSeq {
				return fmt.Errorf("%s: damaged outbox file: reserved sequence number %d below the last, %d", path, st.reserved, st.lastSeq)
			}
		}
		for _, name := range [][]byte{bucketReadings, bucketKept} {
			b := tx.Bucket(name)
			if b == nil {
				return fmt.Errorf("%s: damaged outbox file: no %q bucket", path, name)
			}
			var prev uint64
			c := b.Cursor()
			for k, v := c.First(); k != nil; k, v = c.Next() {
				e, err := decodeEntry(k, v)
				if err != nil {
					return fmt.Errorf("%s: damaged outbox file: bucket %q: %w", path, name, err)
				}
				if (e.kind == KindReading) != bytes.Equal(name, bucketReadings) {
					return fmt.Errorf("%s: damaged outbox file: entry %d of kind %d in bucket %q", path, e.seq, e.kind, name)
				}
				if e.seq <= prev || e.seq > st.lastSeq {
					return fmt.Errorf("%s: damaged outbox file: bucket %q: entry %d out of order (after %d, last sequence number %d)",
						path, name, e.seq, prev, st.lastSeq)
				}
				prev = e.seq
				st.stored++
				if e.kind == KindState {
					if st.states == nil {
						st.states = map[string]uint64{}
					}
					st.states[e.topic] = e.seq // ascending: the last is the newest
				}
			}
		}
		return nil
	})
	return st, err
}

// openError explains an error of bolt.Open.
func openError(path string, err error) error {
	switch {
	case errors.Is(err, berrors.ErrTimeout):
		return fmt.Errorf("%s: in use by another process (file lock held)", path)
	case errors.Is(err, berrors.ErrInvalid), errors.Is(err, berrors.ErrChecksum), errors.Is(err, berrors.ErrVersionMismatch):
		return fmt.Errorf("%s: not an outbox file, or damaged: %w", path, err)
	}
	return fmt.Errorf("%s: %w", path, err)
}

// openFile opens path for writing and creates the buckets of a new file.
// checkFile has passed.
func openFile(path string) (*bolt.DB, error) {
	db, err := bolt.Open(path, 0o600, &bolt.Options{
		Timeout: lockTimeout,
		// The freelist is rebuilt when the file is opened instead of being
		// written at every commit: after a long outage has drained, it can
		// list many thousands of free pages.
		NoFreelistSync: true,
		FreelistType:   bolt.FreelistMapType,
	})
	if err != nil {
		return nil, openError(path, err)
	}
	err = db.Update(func(tx *bolt.Tx) error {
		meta, err := tx.CreateBucketIfNotExists(bucketMeta)
		if err != nil {
			return err
		}
		if meta.Get(keyFormat) == nil {
			if err := meta.Put(keyFormat, []byte(outboxFormat)); err != nil {
				return err
			}
			if err := meta.Put(keyLastSeq, seqKey(0)); err != nil {
				return err
			}
		}
		for _, name := range [][]byte{bucketReadings, bucketKept} {
			if _, err := tx.CreateBucketIfNotExists(name); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		_ = db.Close()
		return nil, fmt.Errorf("%s: initialise: %w", path, err)
	}
	return db, nil
}
