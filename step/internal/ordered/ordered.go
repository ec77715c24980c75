package ordered

import (
	"context"
	"errors"
	"sync"
)

// Run is the tile pipeline's one worker pool. produce runs on the
// calling goroutine and returns the next job (false at the end); solve runs
// on one of workers goroutines, each with its own worker state from newWork; finish receives
// every produced job in production order on one goroutine, with failed set
// once the run has failed (it must then only release the job's resources).
// At most inflight jobs are between produce and finish.
//
// The error rule: the first failure in production order wins, a real
// failure before the cancellations it caused; it cancels the rest. When only
// cancellations remain and the caller's context is done, its error is
// returned.
func Run[J, W any](ctx context.Context, workers, inflight int, newWork func() *W,
	produce func(ctx context.Context) (J, bool, error),
	solve func(ctx context.Context, wk *W, j J) error,
	finish func(j J, failed bool) error) error {
	run, cancel := context.WithCancel(ctx)
	defer cancel()
	pl := &pipe[J]{run: run, cancel: cancel, jobs: make(chan item[J], workers), results: make(chan item[J], inflight),
		sem: make(chan struct{}, inflight)}
	var wg sync.WaitGroup
	for k := 0; k < workers; k++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			work(pl, newWork(), solve)
		}()
	}
	done := make(chan struct{})
	go func() {
		defer close(done)
		pl.consume(finish)
	}()
	pl.feed(produce)
	close(pl.jobs)
	wg.Wait()
	close(pl.results)
	<-done
	err := pl.fe.get()
	if err == nil || !IsCancel(err) {
		return err
	}
	if ctx.Err() != nil {
		return ctx.Err()
	}
	return err
}

// item is a job in the pipeline with its production number and outcome.
type item[J any] struct {
	seq int
	j   J
	err error
}

// pipe is Run's state. sem holds a token per job between produce
// and finish.
type pipe[J any] struct {
	run     context.Context
	cancel  context.CancelFunc
	jobs    chan item[J]
	results chan item[J]
	sem     chan struct{}
	fe      firstErr
}

func (pl *pipe[J]) fail(seq int, err error) {
	pl.fe.set(seq, err)
	pl.cancel()
}

// feed produces jobs until the end, a failure or cancellation.
func (pl *pipe[J]) feed(produce func(ctx context.Context) (J, bool, error)) {
	for seq := 0; ; seq++ {
		select {
		case pl.sem <- struct{}{}:
		case <-pl.run.Done():
		}
		if pl.run.Err() != nil {
			return
		}
		j, ok, err := produce(pl.run)
		if err != nil || !ok {
			if err != nil {
				pl.fail(seq, err)
			}
			<-pl.sem
			return
		}
		pl.jobs <- item[J]{seq: seq, j: j}
	}
}

// work solves jobs with one worker's memory.
func work[J, W any](pl *pipe[J], wk *W, solve func(ctx context.Context, wk *W, j J) error) {
	for it := range pl.jobs {
		if it.err = pl.run.Err(); it.err == nil {
			it.err = solve(pl.run, wk, it.j)
		}
		pl.results <- it
	}
}

// consume hands solved jobs to finish in production order.
func (pl *pipe[J]) consume(finish func(j J, failed bool) error) {
	pending := map[int]item[J]{}
	next := 0
	for it := range pl.results {
		pending[it.seq] = it
		for r, ok := pending[next]; ok; r, ok = pending[next] {
			delete(pending, next)
			if r.err != nil {
				pl.fail(r.seq, r.err)
			}
			if err := finish(r.j, pl.fe.failed()); err != nil {
				pl.fail(r.seq, err)
			}
			<-pl.sem
			next++
		}
	}
}

// firstErr keeps the pipeline's first failure (Run's rule).
type firstErr struct {
	mu  sync.Mutex
	seq int
	err error
}

func (f *firstErr) set(seq int, err error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.err == nil || (IsCancel(f.err) && !IsCancel(err)) || (IsCancel(f.err) == IsCancel(err) && seq < f.seq) {
		f.seq, f.err = seq, err
	}
}

func (f *firstErr) failed() bool {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.err != nil
}

func (f *firstErr) get() error {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.err
}

// IsCancel reports whether err is a cancellation (of a context).
func IsCancel(err error) bool {
	return errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded)
}
