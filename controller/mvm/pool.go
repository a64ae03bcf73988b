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
// each worker, waiting for seq to change, computes its rows and increments
// done; the caller computes its own rows and spins until done reaches
// seq·(n-1). Go's atomics are sequentially consistent, so the job written
// before the seq store is visible to a worker that loads the new seq, and the
// workers' y writes are visible to the caller once it sees done. A product
// therefore costs two cache-line transfers each way and no channel
// operation, lock or allocation.
//
// Idle workers. A worker spins on seq (PAUSE between loads) for spinRounds,
// then yields its thread with runtime.Gosched for yieldRounds, then parks on
// a one-slot channel. On this machine spinRounds is about 2 ms, longer than
// the frame period of any loop rate of interest (≥ 500 Hz), so a running loop
// never pays a wake-up; a stopped loop costs the CPU for a few milliseconds
// only. Parking uses the classic flag-and-token protocol: the worker sets
// parked, re-checks seq, then receives; the caller, after bumping seq,
// clears any set flag with a compare-and-swap and only then sends one token.
// Exactly one side wins the swap, so no wake-up is lost or doubled.
//
// The caller spins for waitSpins only, then yields: with more participants
// than GOMAXPROCS a worker may be waiting for the caller's P.
const (
	spinRounds  = 1 << 15
	yieldRounds = 1 << 10
	waitSpins   = 1 << 12
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
	workers []*worker
	wg      sync.WaitGroup
	once    sync.Once
}

type worker struct {
	_      pad
	parked atomic.Int32
	wake   chan struct{}
	_      pad
}

func startPool(f *Fast, n int) *pool {
	p := &pool{workers: make([]*worker, n)}
	p.wg.Add(n)
	for i := range p.workers {
		w := &worker{wake: make(chan struct{}, 1)}
		p.workers[i] = w
		go p.loop(f, i+1, w)
	}
	return p
}

// run publishes the job in f.job, computes the caller's share and waits for
// the workers.
func (p *pool) run(f *Fast) {
	s := p.seq.Add(1)
	p.wakeParked()
	f.part(0)
	target := s * uint64(len(p.workers))
	for i := 0; p.done.Load() != target; i++ {
		if i < waitSpins {
			pause()
		} else {
			runtime.Gosched()
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

func (p *pool) loop(f *Fast, part int, w *worker) {
	defer p.wg.Done()
	var last uint64
	for {
		last = p.wait(last, w)
		if p.stop.Load() {
			return
		}
		f.part(part)
		p.done.Add(1)
	}
}

// wait returns the first seq different from last.
func (p *pool) wait(last uint64, w *worker) uint64 {
	for {
		for range spinRounds {
			if s := p.seq.Load(); s != last {
				return s
			}
			pause()
		}
		for range yieldRounds {
			if s := p.seq.Load(); s != last {
				return s
			}
			runtime.Gosched()
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
