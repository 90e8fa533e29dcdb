package config

import (
	"fmt"
	"math"
	"sort"
	"time"
)

// WireTime is the time one Modbus RTU read of words registers holds a
// line at baud with no pause: the request (8 characters) and the reply
// (5 + 2·words) at 11 bits a character (start, 8 data, parity or a second
// stop bit, stop), each followed by the 3.5-character silence that ends a
// frame; above 19200 Bd that silence is fixed at 1.75 ms (REFERENCES.md §0
// row 9, the Modbus serial line guide).
func WireTime(baud, words int) time.Duration {
	return TransactionTime(baud, words, 0)
}

// TransactionTime is WireTime with a pause after each reply: the pause is
// quiet time on the line, so it stands in for the last silence when it is
// the longer of the two.
func TransactionTime(baud, words int, pause time.Duration) time.Duration {
	if baud <= 0 {
		return 0
	}
	char := 11.0 / float64(baud) // seconds
	silence := 3.5 * char
	if baud > 19200 {
		silence = 1.75e-3
	}
	exchange := float64(8+5+2*words)*char + silence
	return time.Duration((exchange + max(silence, pause.Seconds())) * float64(time.Second))
}

// LineLoad is what the instruments on one Modbus RTU line ask of it.
type LineLoad struct {
	Address     string  // the serial device
	Baud        int     //
	Instruments []int   // indices in Instruments, in order
	Asked       float64 // reads per second the poll intervals ask for
	Carried     float64 // reads per second the line can carry, pauses included
}

// RTULines works out, for each Modbus RTU line, the reads per second its
// instruments' poll intervals ask for and what the line can carry at its
// baud rate with the configured pause after each request.
func (c *Config) RTULines() []LineLoad {
	byAddr := map[string]*LineLoad{}
	busy := map[string]float64{} // seconds the line is held per second, at the asked rates
	for i, in := range c.Instruments {
		addr, baud, words, ok := c.rtuLine(in)
		if !ok || in.Poll <= 0 {
			continue
		}
		l := byAddr[addr]
		if l == nil {
			l = &LineLoad{Address: addr, Baud: baud}
			byAddr[addr] = l
		}
		l.Instruments = append(l.Instruments, i)
		l.Asked += float64(time.Second) / float64(in.Poll)
		busy[addr] += TransactionTime(baud, words, in.Link.Pause).Seconds() / in.Poll.Seconds()
	}
	out := make([]LineLoad, 0, len(byAddr))
	for addr, l := range byAddr {
		// The line carries the asked mix of reads scaled to one busy second.
		l.Carried = math.Inf(1)
		if b := busy[addr]; b > 0 {
			l.Carried = l.Asked / b
		}
		out = append(out, *l)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Address < out[j].Address })
	return out
}

// simRTULine names the simulator's one RTU line in a LineLoad.
const simRTULine = "the simulator's RTU line"

// rtuLine says which RTU line an instrument is read over, at what baud, and
// how many registers a read takes. Simulated instruments reached over
// Modbus RTU all share the simulator's line, at simulator.rtu.baud; the
// simulator serves every value they read as a float32 (two registers).
func (c *Config) rtuLine(in Instrument) (addr string, baud, words int, ok bool) {
	switch {
	case in.Link.Kind == LinkModbusRTU && in.Link.Address != "":
		return in.Link.Address, in.Link.Baud, valueWords(in.Value.Type), true
	case in.Link.Kind == LinkSim && in.SimVia == LinkModbusRTU:
		return simRTULine, c.Simulator.RTU.Baud, 2, true
	}
	return "", 0, 0, false
}

func valueWords(typ string) int {
	switch typ {
	case "int32", "uint32", "float32":
		return 2
	case "float64":
		return 4
	}
	return 1
}

// validateLines warns when the poll intervals on one RTU line ask for more
// reads than its baud rate carries: the instruments would then be read
// less often than configured, and settle windows would hold fewer readings.
func (c *Config) validateLines(p *Problems) {
	for _, l := range c.RTULines() {
		if l.Asked <= l.Carried*(1+1e-9) {
			continue
		}
		first := l.Instruments[0]
		p.warn(fmt.Sprintf("instruments[%d].poll", first), c.Instruments[first].Poll.String(),
			"the %d instrument(s) on %s ask for %.1f reads/s, but at %d Bd (with the pause after each request) the line carries about %.1f: poll less often, raise the baud rate or shorten the pause",
			len(l.Instruments), l.Address, l.Asked, l.Baud, l.Carried)
	}
}
