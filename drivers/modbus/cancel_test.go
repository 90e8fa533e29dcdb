package modbus

import (
	"context"
	"errors"
	"io"
	"log"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	mb "github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
)

// countingServer is a Modbus TCP server from github.com/simonvetter/modbus
// (a third-party implementation) that counts every request reaching it.
// While hold is open, the first request waits on it, keeping the line busy
// so that others queue behind it.
type countingServer struct {
	regs     map[uint16]uint16 // holding and input registers; absent ones read 0
	requests atomic.Int64
	mu       sync.Mutex
	order    []string // what arrived, in order: "coil", "write", "read"
	holdOnce sync.Once
	hold     chan struct{}
	held     chan struct{} // closed when the held request has arrived
}

func (s *countingServer) arrive(what string) {
	s.requests.Add(1)
	s.mu.Lock()
	s.order = append(s.order, what)
	s.mu.Unlock()
	s.holdOnce.Do(func() {
		if s.hold != nil {
			close(s.held)
			<-s.hold
		}
	})
}

func (s *countingServer) HandleCoils(r *mb.CoilsRequest) ([]bool, error) {
	s.arrive("coil")
	return make([]bool, r.Quantity), nil
}

func (s *countingServer) HandleDiscreteInputs(r *mb.DiscreteInputsRequest) ([]bool, error) {
	s.arrive("read")
	return make([]bool, r.Quantity), nil
}

func (s *countingServer) HandleHoldingRegisters(r *mb.HoldingRegistersRequest) ([]uint16, error) {
	if r.IsWrite {
		s.arrive("write")
		return nil, nil
	}
	s.arrive("read")
	return s.words(r.Addr, r.Quantity), nil
}

func (s *countingServer) HandleInputRegisters(r *mb.InputRegistersRequest) ([]uint16, error) {
	s.arrive("read")
	return s.words(r.Addr, r.Quantity), nil
}

func (s *countingServer) words(addr, n uint16) []uint16 {
	out := make([]uint16, n)
	for i := range out {
		out[i] = s.regs[addr+uint16(i)]
	}
	return out
}

// startCounting serves s on a free loopback port and returns host:port.
func startCounting(t *testing.T, s *countingServer) string {
	t.Helper()
	var last error
	for range 5 {
		addr := "127.0.0.1:" + strconv.Itoa(freePort(t))
		srv, err := mb.NewServer(&mb.ServerConfiguration{URL: "tcp://" + addr, Timeout: time.Minute, MaxClients: 4,
			Logger: log.New(io.Discard, "", 0)}, s)
		if err == nil {
			if err = srv.Start(); err == nil {
				t.Cleanup(func() { srv.Stop() })
				return addr
			}
		}
		last = err // the port was taken between reservation and bind
	}
	t.Fatal(last)
	return ""
}

// sourceOn opens a pressure controller on addr: setpoint at holding 30–31,
// vent coil 3, reached input 2.
func sourceOn(t *testing.T, addr string) *Source {
	t.Helper()
	in := inst("ctl", config.LinkModbusTCP, addr, config.ValueRead{})
	in.Role = config.RoleSource
	in.Link.Timeout = 5 * time.Second
	coil, reached := 3, 2
	in.Set = config.SourceControl{Setpoint: complete(config.ValueRead{Register: 30, Type: "float32"}), VentCoil: &coil, ReachedInput: &reached}
	s, err := drivers.OpenSource(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s.(*Source)
}

// Every request kind plateau sends over Modbus.
var requestKinds = []struct {
	name string
	do   func(ctx context.Context, s *Source) error
}{
	{"read", func(ctx context.Context, s *Source) error { _, err := s.Read(ctx); return err }},
	{"setpoint", func(ctx context.Context, s *Source) error { return s.SetPoint(ctx, 16e5) }},
	{"vent", func(ctx context.Context, s *Source) error { return s.Vent(ctx) }},
	{"reached", func(ctx context.Context, s *Source) error { _, err := s.Reached(ctx); return err }},
}

// With a context cancelled before the call, none of 1000 requests of any
// kind reaches the server.
func TestCancelledRequestsNeverReachTheWire(t *testing.T) {
	for _, k := range requestKinds {
		t.Run(k.name, func(t *testing.T) {
			srv := &countingServer{}
			s := sourceOn(t, startCounting(t, srv))
			if err := k.do(context.Background(), s); err != nil { // the count works
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			cancel()
			for i := range 1000 {
				err := k.do(ctx, s)
				if !errors.Is(err, context.Canceled) {
					t.Fatalf("request %d: err = %v, want context.Canceled", i, err)
				}
			}
			if err := k.do(context.Background(), s); err != nil { // the link still works
				t.Fatal(err)
			}
			if n := srv.requests.Load(); n != 2 {
				t.Errorf("server saw %d requests, want 2: %d cancelled ones reached it", n, n-2)
			}
		})
	}
}

// The case that matters for safety: setpoints queue behind a request that
// holds the line; their context is cancelled (the guard vented and paused)
// as the line frees, while more setpoints keep arriving. Of 1000, none may
// reach the wire: half were queued when the cancel came, half arrive while
// the line is free and the context already done.
func TestQueuedSetpointsCancelledNeverReachTheWire(t *testing.T) {
	srv := &countingServer{hold: make(chan struct{}), held: make(chan struct{})}
	s := sourceOn(t, startCounting(t, srv))
	first := make(chan error, 1)
	go func() { _, err := s.Read(context.Background()); first <- err }()
	<-srv.held

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	var wg sync.WaitGroup
	errs := make(chan error, 1000)
	for i := range 1000 {
		if i == 500 {
			time.Sleep(50 * time.Millisecond) // the first half is queued by now
			cancel()
			close(srv.hold)
			if err := <-first; err != nil {
				t.Fatal(err)
			}
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			errs <- s.SetPoint(ctx, 16e5)
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		if !errors.Is(err, context.Canceled) {
			t.Fatalf("queued setpoint: err = %v, want context.Canceled", err)
		}
	}
	if n := srv.requests.Load(); n != 1 {
		t.Errorf("server saw %d setpoints after the cancel, want none", n-1)
	}
	if err := s.Vent(context.Background()); err != nil || srv.requests.Load() != 2 {
		t.Errorf("vent after the cancel: %v (requests %d)", err, srv.requests.Load())
	}
}

// A vent does not wait behind queued setpoints and reads: it is next on the
// wire after the request already there.
func TestVentGoesAheadOfQueuedRequests(t *testing.T) {
	srv := &countingServer{hold: make(chan struct{}), held: make(chan struct{})}
	s := sourceOn(t, startCounting(t, srv))
	first := make(chan error, 1)
	go func() { _, err := s.Read(context.Background()); first <- err }()
	<-srv.held
	var wg sync.WaitGroup
	queue := func(do func() error) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			if err := do(); err != nil {
				t.Error(err)
			}
		}()
	}
	ctx := context.Background()
	for range 5 {
		queue(func() error { return s.SetPoint(ctx, 6e5) })
		queue(func() error { _, err := s.Read(ctx); return err })
	}
	time.Sleep(50 * time.Millisecond) // the ten are queued by now
	queue(func() error { return s.Vent(ctx) })
	time.Sleep(20 * time.Millisecond)
	close(srv.hold)
	if err := <-first; err != nil {
		t.Fatal(err)
	}
	wg.Wait()
	srv.mu.Lock()
	defer srv.mu.Unlock()
	if len(srv.order) != 12 || srv.order[1] != "coil" {
		t.Errorf("order on the wire %v: want the vent right after the first read", srv.order)
	}
}

// An error from a cancelled request names what was refused.
func TestCancelledErrorSaysWhat(t *testing.T) {
	s := sourceOn(t, startCounting(t, &countingServer{}))
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	err := s.SetPoint(ctx, 1e5)
	if err == nil {
		t.Fatal("a cancelled setpoint succeeded")
	}
	if !strings.Contains(err.Error(), "write holding 30×2") || drivers.KindOf(err) != drivers.KindLinkDown {
		t.Errorf("err = %v (kind %s)", err, drivers.KindOf(err))
	}
}
