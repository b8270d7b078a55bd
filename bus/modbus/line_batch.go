package modbus

import (
	"context"
	"fmt"
	"slices"
	"time"
)

// reqRef names one request of a batch: request k of poll p.
type reqRef struct{ p, k int }

// inProgress is a poll being read in batches.
type inProgress struct {
	left  int // requests not yet resolved
	errK  int // the request whose error fails the poll: the first failed, in request order
	err   error
	stamp time.Time // Result.Time, from LineConfig.Now (see readBatch)
	start time.Time
}

// batchState is the storage pollBatches reuses from one round to the next.
type batchState struct {
	due   []int        // polls due now, earliest first
	refs  []reqRef     // their requests, in order
	reqs  []Request    // the requests of the batch being read
	retry []reqRef     // requests to read again after a damaged frame
	polls []inProgress // per poll
}

// pollBatches reads every poll that is due: their requests, in order, in
// batches of up to InFlight requests, each batch in flight at once. A poll
// is delivered as soon as the last of its requests is resolved, so an
// answer does not wait for a slower one of another poll; a request whose
// answer came damaged is read again once, on its own, after its batch. It
// reports false when ctx ended (what had not been delivered by then is
// not).
func (l *Line) pollBatches(ctx context.Context, states []pollState) bool {
	b := &l.batch
	if b.polls == nil {
		b.polls = make([]inProgress, len(l.polls))
	}
	now := time.Now()
	b.due = b.due[:0]
	for i := range states {
		if !states[i].due.After(now) {
			b.due = append(b.due, i)
		}
	}
	slices.SortStableFunc(b.due, func(x, y int) int { return states[x].due.Compare(states[y].due) })
	b.refs = b.refs[:0]
	for _, i := range b.due {
		for k := range l.polls[i].Requests {
			b.refs = append(b.refs, reqRef{i, k})
		}
		b.polls[i] = inProgress{left: len(l.polls[i].Requests), errK: -1}
	}
	br := l.r.(BatchReader)
	for from := 0; from < len(b.refs); from += l.cfg.InFlight {
		if !l.readBatch(ctx, br, states, b.refs[from:min(from+l.cfg.InFlight, len(b.refs))]) {
			return false
		}
	}
	return true
}

// readBatch reads the requests of chunk together and resolves them.
func (l *Line) readBatch(ctx context.Context, br BatchReader, states []pollState, chunk []reqRef) bool {
	b := &l.batch
	b.reqs, b.retry = b.reqs[:0], b.retry[:0]
	stamp, start := l.now(), time.Now()
	for _, s := range chunk {
		b.reqs = append(b.reqs, l.polls[s.p].Requests[s.k])
		if pe := &b.polls[s.p]; pe.start.IsZero() {
			pe.stamp, pe.start = stamp, start
		}
	}
	// A server that answers in turn reads a request only once it has
	// answered the one before: a poll's registers were read after the
	// answer that came before its first request's answer, not at the
	// batch's send time, which behind a slow serial line can be many
	// transactions earlier.
	before := stamp
	// The reader gives each request its Timeout from the answer before
	// it (Client.ReadBatch); the batch as a whole takes at most what its
	// requests could one at a time.
	rctx, cancel := context.WithTimeout(ctx, time.Duration(len(chunk))*l.cfg.Timeout)
	br.ReadBatch(rctx, b.reqs, func(i int, regs []uint16, err error) {
		if ctx.Err() != nil {
			return
		}
		s := chunk[i]
		if s.k == 0 {
			b.polls[s.p].stamp = before
		}
		before = l.now()
		c := &l.stats[s.p]
		if err == nil && len(regs) != int(b.reqs[i].Quantity) {
			err = fmt.Errorf("%v: %w: %d registers for %d asked", b.reqs[i], ErrShortResponse, len(regs), b.reqs[i].Quantity)
		}
		l.record(c, time.Since(start), err)
		if Kind(err) == KindFrame {
			b.retry = append(b.retry, s)
			return
		}
		l.resolve(states, s, regs, err)
	})
	cancel()
	l.line.busy.Add(int64(time.Since(start)))
	for _, s := range b.retry {
		if ctx.Err() != nil {
			break
		}
		l.stats[s.p].retries.Add(1)
		regs, err := l.transact(ctx, &l.stats[s.p], l.polls[s.p].Requests[s.k])
		if ctx.Err() == nil {
			l.resolve(states, s, regs, err)
		}
	}
	return ctx.Err() == nil
}

// resolve takes the outcome of request s.k of poll s.p, and delivers the
// poll when it was its last.
func (l *Line) resolve(states []pollState, s reqRef, regs []uint16, err error) {
	pe := &l.batch.polls[s.p]
	if err == nil {
		l.blocks[s.p][s.k] = append(l.blocks[s.p][s.k][:0], regs...)
	} else if pe.errK < 0 || s.k < pe.errK {
		pe.err, pe.errK = err, s.k
	}
	if pe.left--; pe.left > 0 {
		return
	}
	res := Result{Poll: s.p, Time: pe.stamp, Blocks: l.blocks[s.p], Err: pe.err, Elapsed: time.Since(pe.start)}
	*pe = inProgress{}
	l.finish(s.p, &states[s.p], res)
}
