package sim

import (
	"fmt"
	"strconv"
	"strings"
	"time"

	"plateau/config"
)

// FaultNames lists the fault switches SetFault knows, as the config spells them.
var FaultNames = []string{"drop", "slow", "slow_by", "bad_crc", "garbage", "stuck", "stuck_for", "spike", "link_down", "link_every"}

// SetFault switches one fault from text such as "drop=0.05" (a probability
// per request) or "link_down=5s" (a duration), as the command line gives it.
func SetFault(f *config.SimFaults, spec string) error {
	name, val, ok := strings.Cut(spec, "=")
	name, val = strings.TrimSpace(strings.ToLower(name)), strings.TrimSpace(val)
	if !ok || val == "" {
		return fmt.Errorf("fault %q: write name=value, e.g. drop=0.05 or link_down=5s (names: %s)", spec, strings.Join(FaultNames, ", "))
	}
	rates := map[string]*float64{"drop": &f.Drop, "slow": &f.Slow, "bad_crc": &f.BadCRC, "garbage": &f.Garbage, "stuck": &f.Stuck, "spike": &f.Spike}
	durations := map[string]*time.Duration{"slow_by": &f.SlowBy, "stuck_for": &f.StuckFor, "link_down": &f.LinkDown, "link_every": &f.LinkEvery}
	if p, ok := rates[name]; ok {
		v, err := strconv.ParseFloat(val, 64)
		if err != nil || v < 0 || v > 1 {
			return fmt.Errorf("fault %s=%s: want a probability per request from 0 to 1", name, val)
		}
		*p = v
		return nil
	}
	if p, ok := durations[name]; ok {
		d, err := time.ParseDuration(val)
		if err != nil || d < 0 {
			return fmt.Errorf("fault %s=%s: want a duration such as 5s", name, val)
		}
		*p = d
		return nil
	}
	return fmt.Errorf("fault %q: unknown; known: %s", name, strings.Join(FaultNames, ", "))
}
