package modbus

import (
	"context"
	"io"
	"log"
	"strconv"
	"testing"
	"time"

	mb "github.com/simonvetter/modbus"

	"plateau/config"
	"plateau/drivers"
)

// A read through the driver allocates what the bare library client does
// plus the reading's audit text (the register words as hex), and nothing
// else of plateau's own: no closures, hand-offs or log records with logging
// off. Counted against a libmodbus server over loopback TCP.
func TestReadAllocatesOnlyTheAuditText(t *testing.T) {
	port, _ := startTCPPeer(t, 0)
	addr := "127.0.0.1:" + strconv.Itoa(port)
	ctx := context.Background()

	c, err := mb.NewClient(&mb.ClientConfiguration{URL: "tcp://" + addr, Timeout: time.Second, Logger: log.New(io.Discard, "", 0)})
	if err != nil {
		t.Fatal(err)
	}
	if err := c.Open(); err != nil {
		t.Fatal(err)
	}
	bare := testing.AllocsPerRun(200, func() {
		if _, err := c.ReadRegisters(10, 2, mb.HOLDING_REGISTER); err != nil {
			t.Fatal(err)
		}
	})
	c.Close() // the peer serves one connection at a time

	g, err := drivers.OpenGauge(inst("ref", config.LinkModbusTCP, addr,
		config.ValueRead{Table: "holding", Register: 10, Type: "float32", WordOrder: "ABCD", Scale: 1}), drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	defer g.Close()
	if _, err := g.Read(ctx); err != nil {
		t.Fatal(err)
	}
	driver := testing.AllocsPerRun(200, func() {
		if _, err := g.Read(ctx); err != nil {
			t.Fatal(err)
		}
	})
	t.Logf("allocations per read: bare library %.1f, driver %.1f", bare, driver)
	if driver > bare+1 {
		t.Errorf("driver allocates %.1f per read, bare library %.1f: more than the audit text", driver, bare)
	}
}
