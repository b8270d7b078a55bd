package mqtt

// queue is the publisher's bounded FIFO of messages, a ring buffer that
// grows by doubling up to its limit. Its first sent entries have been handed
// to the current connection and wait for their PUBACK; they leave the queue
// only when acknowledged (popFront), and a lost connection makes them unsent
// again (unsendAll), so they go out again first and in order. queue is not
// safe for concurrent use: the Publisher guards it with its mutex.
type queue struct {
	buf   []Message
	head  int // index in buf of the oldest entry
	n     int // entries held
	sent  int // entries [0, sent) are in flight on the connection
	limit int // most entries held
}

func newQueue(limit int) queue {
	return queue{buf: make([]Message, min(limit, 256)), limit: limit}
}

func (q *queue) len() int   { return q.n }
func (q *queue) full() bool { return q.n >= q.limit }

// at returns the i-th oldest entry.
func (q *queue) at(i int) *Message {
	return &q.buf[(q.head+i)%len(q.buf)]
}

// push appends m; the caller has checked that the queue is not full.
func (q *queue) push(m Message) {
	if q.n == len(q.buf) {
		q.grow()
	}
	*q.at(q.n) = m
	q.n++
}

func (q *queue) grow() {
	nb := make([]Message, min(2*len(q.buf), q.limit))
	for i := range q.n {
		nb[i] = *q.at(i)
	}
	q.buf, q.head = nb, 0
}

// nextUnsent marks the oldest unsent entry as sent and returns it.
func (q *queue) nextUnsent() (Message, bool) {
	if q.sent >= q.n {
		return Message{}, false
	}
	m := *q.at(q.sent)
	q.sent++
	return m, true
}

// popFront removes the oldest entry, which is in flight, and returns it.
func (q *queue) popFront() Message {
	p := q.at(0)
	m := *p
	*p = Message{}
	q.head = (q.head + 1) % len(q.buf)
	q.n--
	q.sent--
	return m
}

// unsendAll returns every in-flight entry to the unsent part.
func (q *queue) unsendAll() { q.sent = 0 }

// dropOldestUnsent removes the oldest unsent entry that is not retained
// and reports whether there was one. Retained entries (current states) are
// kept: a later reading replaces a lost one, a lost state change is not
// replaced until the state changes again.
func (q *queue) dropOldestUnsent() bool {
	for i := q.sent; i < q.n; i++ {
		if !q.at(i).Retain {
			q.removeAt(i)
			return true
		}
	}
	return false
}

// removeAt removes the i-th oldest entry, shifting the older ones one
// place towards the tail.
func (q *queue) removeAt(i int) {
	for j := i; j > 0; j-- {
		*q.at(j) = *q.at(j - 1)
	}
	*q.at(0) = Message{}
	q.head = (q.head + 1) % len(q.buf)
	q.n--
}
