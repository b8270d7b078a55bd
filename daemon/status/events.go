package status

import (
	"net/http"
	"strconv"
	"time"
)

// Live stream parameters.
const (
	ringSize       = 1024                   // recent reading events kept for the live stream: seconds of headroom at hundreds of readings a second
	liveInterval   = 250 * time.Millisecond // least time between two batches to one browser
	healthInterval = 2 * time.Second        // health (line rates) is re-sent this often
	pingInterval   = 15 * time.Second       // a comment line keeps idle connections open
	writeTimeout   = 10 * time.Second       // a browser that takes longer to take a batch is dropped
	maxClients     = 64                     // live streams served at once
	unsent         = ^uint64(0)             // a version no state has
)

// event is one reading event in the ring.
type event struct {
	head string
	data []byte // {"reading":…,"glow":…}
}

// appendEvent puts a reading event of head in the ring and wakes the
// streams that wait. Called with s.mu held; never blocks.
func (s *Server) appendEvent(head string, data []byte) {
	s.ring[s.next%ringSize] = event{head: head, data: data}
	s.next++
	s.wakeClients()
}

// wakeClients wakes the streams waiting for news. Called with s.mu held.
func (s *Server) wakeClients() {
	if s.waiting {
		close(s.wake)
		s.wake = make(chan struct{})
		s.waiting = false
	}
}

// serveEvents streams server-sent events:
//
//	event: readings  data: [{"reading":…,"glow":…},…]  (latest per head since the last batch; id: sequence)
//	event: heads     data: the head list (as in /api/state)
//	event: alarms    data: the alarm list
//	event: health    data: the health object
//	event: resync    data: {}  (readings were lost: fetch /api/state again)
//
// The heads, alarms and health are sent on connecting and whenever they
// change; health at least every two seconds. A stream resumes after the
// sequence number in Last-Event-ID (sent by EventSource on reconnecting)
// or in ?since= while those readings are still in the ring.
func (s *Server) serveEvents(w http.ResponseWriter, r *http.Request) {
	s.mu.Lock()
	if s.clients >= maxClients {
		s.mu.Unlock()
		http.Error(w, "too many live streams", http.StatusServiceUnavailable)
		return
	}
	s.clients++
	cursor := s.next
	s.mu.Unlock()
	defer func() {
		s.mu.Lock()
		s.clients--
		s.mu.Unlock()
	}()
	resume := r.Header.Get("Last-Event-ID")
	if resume == "" {
		resume = r.URL.Query().Get("since")
	}
	if id, err := strconv.ParseUint(resume, 10, 64); err == nil && id <= cursor {
		cursor = id
	}

	rc := http.NewResponseController(w)
	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("Cache-Control", "no-store")
	h.Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)

	ctx := r.Context()
	var (
		buf                          []byte
		batch                        []event
		seen                         = map[string]bool{}
		headsVer, alarmsVer, hlthVer = unsent, unsent, unsent // versions sent
		lastHealth                   time.Time
		lastFlush                    time.Time
	)
	ping := time.NewTicker(pingInterval)
	defer ping.Stop()
	healthTick := time.NewTicker(healthInterval)
	defer healthTick.Stop()
	pace := time.NewTimer(0)
	defer pace.Stop()

	buf = append(buf, "retry: 2000\n\n"...)
	for {
		// Pace the batches: at most one per liveInterval.
		if d := liveInterval - time.Since(lastFlush); d > 0 {
			pace.Reset(d)
			select {
			case <-pace.C:
			case <-ctx.Done():
				return
			case <-s.stop:
				return
			}
		}

		s.mu.Lock()
		lost := s.next-cursor > ringSize
		if lost {
			cursor = s.next - ringSize
		}
		batch = batch[:0]
		for seq := cursor; seq < s.next; seq++ {
			batch = append(batch, s.ring[seq%ringSize])
		}
		cursor = s.next
		var heads, alarms []byte
		if headsVer != s.headsVer {
			headsVer, heads = s.headsVer, s.headsJSON
		}
		if alarmsVer != s.alarmsVer {
			alarmsVer, alarms = s.alarmsVer, s.alarmsJSON
		}
		healthDue := hlthVer != s.healthVer || time.Since(lastHealth) >= healthInterval
		hlthVer = s.healthVer
		s.mu.Unlock()

		if lost {
			buf = append(buf, "event: resync\ndata: {}\n\n"...)
		}
		if heads != nil {
			buf = appendEvent(buf, "heads", heads)
		}
		if alarms != nil {
			buf = appendEvent(buf, "alarms", alarms)
		}
		if healthDue {
			buf = appendEvent(buf, "health", s.healthJSON())
			lastHealth = time.Now()
		}
		if len(batch) > 0 {
			buf = appendReadings(buf, batch, seen, cursor)
		}

		if len(buf) > 0 {
			rc.SetWriteDeadline(time.Now().Add(writeTimeout))
			if _, err := w.Write(buf); err != nil {
				return
			}
			if err := rc.Flush(); err != nil {
				return
			}
			buf = buf[:0]
			lastFlush = time.Now()
			continue
		}

		// Nothing to send: wait for news.
		s.mu.Lock()
		if s.next != cursor || headsVer != s.headsVer || alarmsVer != s.alarmsVer || hlthVer != s.healthVer {
			s.mu.Unlock()
			continue
		}
		s.waiting = true
		wake := s.wake
		s.mu.Unlock()
		select {
		case <-wake:
		case <-healthTick.C:
		case <-ping.C:
			buf = append(buf, ": ping\n\n"...)
		case <-ctx.Done():
			return
		case <-s.stop:
			return
		}
	}
}

func appendEvent(buf []byte, name string, data []byte) []byte {
	buf = append(buf, "event: "...)
	buf = append(buf, name...)
	buf = append(buf, "\ndata: "...)
	buf = append(buf, data...)
	return append(buf, "\n\n"...)
}

// appendReadings writes a readings event with the latest event of each
// head in batch (oldest first), with the stream's sequence number as id.
func appendReadings(buf []byte, batch []event, seen map[string]bool, id uint64) []byte {
	clear(seen)
	// Walk from the newest, keep the first of each head, drop the rest.
	for i := len(batch) - 1; i >= 0; i-- {
		if seen[batch[i].head] {
			batch[i].data = nil
			continue
		}
		seen[batch[i].head] = true
	}
	buf = append(buf, "id: "...)
	buf = strconv.AppendUint(buf, id, 10)
	buf = append(buf, "\nevent: readings\ndata: ["...)
	first := true
	for _, e := range batch {
		if e.data == nil {
			continue
		}
		if !first {
			buf = append(buf, ',')
		}
		first = false
		buf = append(buf, e.data...)
	}
	return append(buf, "]\n\n"...)
}
