package line

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"plateau/config"
	"plateau/drivers"
)

// The driver adds no defaults: an option it cannot work without, left unset,
// is an error at open that names the option.
func TestUnsetOptionsAreErrorsAtOpen(t *testing.T) {
	full := func() config.Instrument {
		return config.Instrument{Name: "dut", Unit: "bar",
			Line: config.LineProtocol{Query: "PR?", Terminator: "\r\n", Overload: common},
			Link: config.Link{Kind: config.LinkSerial, Address: "/dev/null", Baud: 9600, DataBits: 8, Parity: "none", StopBits: 1,
				Timeout: time.Second, Backoff: time.Second}}
	}
	cases := []struct {
		name   string
		change func(*config.Instrument)
		key    string
	}{
		{"address", func(in *config.Instrument) { in.Link.Address = "" }, "link.address"},
		{"baud", func(in *config.Instrument) { in.Link.Baud = 0 }, "link.baud"},
		{"data bits", func(in *config.Instrument) { in.Link.DataBits = 0 }, "link.data_bits"},
		{"parity", func(in *config.Instrument) { in.Link.Parity = "" }, "link.parity"},
		{"stop bits", func(in *config.Instrument) { in.Link.StopBits = 0 }, "link.stop_bits"},
		{"timeout", func(in *config.Instrument) { in.Link.Timeout = 0 }, "link.timeout"},
		{"negative backoff", func(in *config.Instrument) { in.Link.Backoff = -time.Second }, "link.backoff"},
		{"terminator", func(in *config.Instrument) { in.Line.Terminator = "" }, "line.terminator"},
		{"reply pattern", func(in *config.Instrument) { in.Line.Reply = "(" }, "line.reply"},
		{"unit", func(in *config.Instrument) { in.Unit = "" }, "unit"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			in := full()
			c.change(&in)
			g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
			if err == nil {
				g.Close()
				t.Fatalf("opened without %s", c.key)
			}
			if !strings.Contains(err.Error(), c.key) {
				t.Errorf("error %q does not name %s", err, c.key)
			}
		})
	}
	g, err := drivers.OpenGauge(full(), drivers.OpenEnv{})
	if err != nil {
		t.Fatalf("complete options: %v", err)
	}
	g.Close()
}

// Replies that spell a non-number are bad replies that keep their line;
// never a NaN reading.
func TestNonFiniteRepliesAreBadReplies(t *testing.T) {
	replies := []string{"nan", "NaN bar", "inf", "-Infinity", "+Inf bar", "1e999", "-1e400 bar"}
	master, dev := instrumentPty(t)
	g := openLine(t, dev, config.LineProtocol{Query: "PR?"})
	var with []string
	for _, r := range replies {
		with = append(with, r+"\r\n")
	}
	answer(t, master, "PR?", with...)
	for _, want := range replies {
		r, err := g.Read(context.Background())
		if !errors.Is(err, drivers.ErrBadReply) {
			t.Errorf("reply %q: %+v, %v; want a bad reply", want, r, err)
			continue
		}
		if r.Pa != 0 || r.Raw != 0 || r.Wire != want {
			t.Errorf("reply %q: failed read %+v should keep only the line", want, r)
		}
	}
}

// Two line instruments on one device would interleave their queries: the
// second is refused at open, and the device is free again after Close.
func TestOnePortOneInstrument(t *testing.T) {
	_, dev := instrumentPty(t)
	in := config.Instrument{Name: "ref", Unit: "bar", Line: config.LineProtocol{Query: "PR?", Terminator: "\r\n", Overload: common},
		Link: config.Link{Kind: config.LinkSerial, Address: dev, Baud: 9600, DataBits: 8, Parity: "none", StopBits: 1, Timeout: time.Second}}
	g, err := drivers.OpenGauge(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatal(err)
	}
	in.Name = "dut"
	if g2, err := drivers.OpenGauge(in, drivers.OpenEnv{}); err == nil {
		g2.Close()
		t.Fatal("a second instrument opened on the same port")
	} else if !strings.Contains(err.Error(), `line instrument "ref"`) {
		t.Errorf("error %q does not name the owner", err)
	}
	g.Close()
	g2, err := drivers.OpenGauge(in, drivers.OpenEnv{})
	if err != nil {
		t.Fatalf("after Close: %v", err)
	}
	g2.Close()
}

// Close may be called from two places at once (a shutdown and a failed
// start) without racing on the port.
func TestCloseTwiceAtOnce(t *testing.T) {
	master, dev := instrumentPty(t)
	g := openLine(t, dev, config.LineProtocol{Query: "PR?"})
	answer(t, master, "PR?", "+1.0 bar\r\n")
	if _, err := g.Read(context.Background()); err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 2)
	for range 2 {
		go func() { done <- g.Close() }()
	}
	for range 2 {
		if err := <-done; err != nil {
			t.Error(err)
		}
	}
	if _, err := g.Read(context.Background()); !errors.Is(err, drivers.ErrLinkDown) {
		t.Errorf("read after Close: %v, want link down", err)
	}
}
