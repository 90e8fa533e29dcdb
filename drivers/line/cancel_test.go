package line

import (
	"bytes"
	"context"
	"errors"
	"os"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"plateau/config"
)

// queryCounter plays a query instrument on the master side of a
// pseudo-terminal: it counts every query line that arrives and answers it.
// While hold is open, the answer to the first query waits on it.
type queryCounter struct {
	lines atomic.Int64
	hold  chan struct{}
	held  chan struct{}
}

func (q *queryCounter) serve(master *os.File) {
	buf := make([]byte, 256)
	var pending []byte
	for {
		n, err := master.Read(buf)
		if err != nil {
			return
		}
		pending = append(pending, buf[:n]...)
		for {
			i := bytes.Index(pending, []byte("\r\n"))
			if i < 0 {
				break
			}
			pending = pending[i+2:]
			if q.lines.Add(1) == 1 && q.hold != nil {
				close(q.held)
				<-q.hold
			}
			if _, err := master.Write([]byte("+1.00000 bar\r\n")); err != nil {
				return
			}
		}
	}
}

func countingLine(t *testing.T, q *queryCounter) *Gauge {
	t.Helper()
	master, dev := instrumentPty(t)
	go q.serve(master)
	g := openLine(t, dev, config.LineProtocol{Query: "PR?"})
	return g.(*Gauge)
}

// With a cancelled context, none of 1000 reads sends its query.
func TestCancelledReadsNeverReachTheLine(t *testing.T) {
	q := &queryCounter{}
	g := countingLine(t, q)
	if _, err := g.Read(context.Background()); err != nil { // the count works
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	for i := range 1000 {
		if _, err := g.Read(ctx); !errors.Is(err, context.Canceled) {
			t.Fatalf("read %d: err = %v, want context.Canceled", i, err)
		}
	}
	if _, err := g.Read(context.Background()); err != nil { // the port still works
		t.Fatal(err)
	}
	if n := q.lines.Load(); n != 2 {
		t.Errorf("instrument got %d queries, want 2: %d cancelled reads reached the line", n, n-2)
	}
}

// Reads queued behind one that holds the port, cancelled as the port frees,
// with more arriving after the cancel: none sends its query.
func TestQueuedReadsCancelledNeverReachTheLine(t *testing.T) {
	q := &queryCounter{hold: make(chan struct{}), held: make(chan struct{})}
	g := countingLine(t, q)
	g.opts.Timeout = 5 * time.Second // the held read must not time out
	first := make(chan error, 1)
	go func() { _, err := g.Read(context.Background()); first <- err }()
	<-q.held

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var wg sync.WaitGroup
	errs := make(chan error, 1000)
	for i := range 1000 {
		if i == 500 {
			time.Sleep(50 * time.Millisecond)
			cancel()
			close(q.hold)
			if err := <-first; err != nil {
				t.Fatal(err)
			}
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			_, err := g.Read(ctx)
			errs <- err
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		if !errors.Is(err, context.Canceled) {
			t.Fatalf("queued read: err = %v, want context.Canceled", err)
		}
	}
	time.Sleep(20 * time.Millisecond) // a query in flight would have arrived by now
	if n := q.lines.Load(); n != 1 {
		t.Errorf("instrument got %d queries after the cancel, want none", n-1)
	}
}
