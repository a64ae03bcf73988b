package mvm

import (
	"runtime"
	"sync"
	"sync/atomic"
)

// The pool is the one place in controller/ that starts goroutines: the
// controller core stays single-threaded and deterministic, and a Fast
// multiplier splits its rows across n-1 persistent workers plus the caller.
//
// Hand-off. The caller writes the job into Fast.job, then increments seq;
// each worker, waiting for seq to change, claims row blocks and computes
// them; the caller claims and computes blocks too, then spins until the done
// counter shows every block of the job finished. A block is claimed by
// raising its claimed word to the job number k with a compare-and-swap, so
// each block is computed exactly once per job, and a worker that wakes after
// its job is over claims nothing. Each participant first claims the blocks
// it owns, in order (under no contention every core reads the same rows on
// every product, which stay in its caches), then steals the others' from
// their far end: a worker the OS has not scheduled yet no longer holds up the
// product, the caller does its blocks. Go's atomics are sequentially
// consistent, so the job written before the seq store is visible to a worker
// that loads the new seq, and the y written by a block is visible to the
// caller once it sees done. A product costs a few cache-line transfers and
// no channel operation, lock or allocation.
//
// Idle workers. A waiting worker spins on seq with PAUSE between loads;
// every goschedEvery rounds it lets other goroutines have its P
// (runtime.Gosched), and every osYieldEvery rounds other threads have its
// core (sched_yield), so a caller that the OS put on the same core is not
// starved. Yielding the core more often hurt: on a loaded machine each
// sched_yield may hand the core to another process for a time slice.
// After spinRounds (about 1.5 ms here: PAUSE is ~35 ns) it parks on a
// one-slot channel. That is longer than the frame period of any loop rate of
// interest (>= 1 kHz), so a running loop never pays a wake-up, and a stopped
// loop burns a core for 1.5 ms only. Parking uses the flag-and-token
// protocol: the worker sets parked, re-checks seq, then receives; the caller,
// after bumping seq, clears any set flag with a compare-and-swap and only
// then sends one token. Exactly one side wins the swap, so no wake-up is lost
// or doubled.
//
// The caller, waiting for done, spins for waitSpins rounds (a few µs, the
// usual imbalance between shares), then yields core and P every goschedEvery
// rounds: with more participants than cores, or a worker descheduled by the
// OS, the worker may need the caller's core or P.
const (
	spinRounds   = 1 << 15
	goschedEvery = 1 << 5
	osYieldEvery = 1 << 10
	waitSpins    = 1 << 7
)

// pad keeps the counters written by different cores on different cache lines.
type pad [64]byte

type pool struct {
	_       pad
	seq     atomic.Uint64
	_       pad
	done    atomic.Uint64
	_       pad
	stop    atomic.Bool
	runs    uint64  // products started; touched by the caller only
	claimed []claim // per row block: the last job that claimed it
	workers []*worker
	wg      sync.WaitGroup
	once    sync.Once
}

type claim struct {
	job atomic.Uint64
	_   [56]byte
}

type worker struct {
	_      pad
	parked atomic.Int32
	wake   chan struct{}
	_      pad
}

func startPool(f *Fast, n int) *pool {
	p := &pool{workers: make([]*worker, n), claimed: make([]claim, len(f.parts))}
	p.wg.Add(n)
	for i := range p.workers {
		w := &worker{wake: make(chan struct{}, 1)}
		p.workers[i] = w
		go p.loop(f, i+1, w)
	}
	return p
}

// work computes, for job k, the blocks participant me can claim: its own in
// order, then the others' from the end of each owner's range. It returns how
// many it computed.
func (p *pool) work(f *Fast, me int, k uint64) uint64 {
	var n uint64
	try := func(b int) {
		c := &p.claimed[b].job
		for {
			old := c.Load()
			if old >= k {
				return
			}
			if c.CompareAndSwap(old, k) {
				f.part(b)
				n++
				return
			}
		}
	}
	for b := me * f.per; b < (me+1)*f.per; b++ {
		try(b)
	}
	for i := 1; i < f.workers; i++ {
		q := (me + i) % f.workers
		for b := (q+1)*f.per - 1; b >= q*f.per; b-- {
			try(b)
		}
	}
	return n
}

// run publishes the job in f.job, computes blocks with the workers and
// waits until all are done.
func (p *pool) run(f *Fast) {
	k := p.seq.Add(1)
	p.wakeParked()
	p.done.Add(p.work(f, 0, k))
	p.runs++
	target := p.runs * uint64(len(f.parts))
	for i := 0; p.done.Load() != target; i++ {
		if i >= waitSpins && i%goschedEvery == 0 {
			osYield()
			runtime.Gosched()
		} else {
			pause()
		}
	}
}

func (p *pool) wakeParked() {
	for _, w := range p.workers {
		if w.parked.Load() == 1 && w.parked.CompareAndSwap(1, 0) {
			w.wake <- struct{}{}
		}
	}
}

func (p *pool) loop(f *Fast, me int, w *worker) {
	defer p.wg.Done()
	var last uint64
	for {
		last = p.wait(last, w)
		if p.stop.Load() {
			return
		}
		if n := p.work(f, me, last); n > 0 {
			p.done.Add(n)
		}
	}
}

// wait returns the first seq different from last.
func (p *pool) wait(last uint64, w *worker) uint64 {
	for {
		for i := 1; i <= spinRounds; i++ {
			if s := p.seq.Load(); s != last {
				return s
			}
			switch {
			case i%osYieldEvery == 0:
				osYield()
			case i%goschedEvery == 0:
				runtime.Gosched()
			default:
				pause()
			}
		}
		w.parked.Store(1)
		if s := p.seq.Load(); s != last {
			if !w.parked.CompareAndSwap(1, 0) {
				<-w.wake // the caller won the swap and sent a token: take it
			}
			return s
		}
		<-w.wake
	}
}

func (p *pool) close() {
	p.once.Do(func() {
		p.stop.Store(true)
		p.seq.Add(1)
		p.wakeParked()
		p.wg.Wait()
	})
}
