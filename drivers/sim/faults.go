package sim

import (
	"math/rand/v2"
	"sync"
	"time"

	"plateau/config"
)

// spikeFraction is the size of a single wild sample, as a fraction of each
// instrument's span.
const spikeFraction = 0.2

// fate is what fault injection decided for one request.
type fate struct {
	drop    bool          // no reply at all
	delay   time.Duration // reply late by this much (wall time: it is a transport effect)
	corrupt bool          // RTU: bad CRC; line instrument: a garbage line
}

// injector decides, request by request, which faults happen. Its random
// numbers come from the rig's seed, so the same sequence of requests meets
// the same faults. Value faults (stuck, spike) act on samples; the link-down
// schedule is a pure function of clock time.
type injector struct {
	f     config.SimFaults
	epoch time.Time

	mu         sync.Mutex
	rng        *rand.Rand
	stuckUntil time.Time
	stuck      Sample
}

func newInjector(f config.SimFaults, seed uint64, epoch time.Time) *injector {
	return &injector{f: f, epoch: epoch, rng: rand.New(rand.NewPCG(seed, 0x5eed_fa17))}
}

func (j *injector) hit(rate float64) bool {
	if rate <= 0 {
		return false
	}
	return j.rng.Float64() < rate
}

// request decides the fate of one request. corruptRate is the rate of the
// fault that fits the transport (bad CRC for RTU, garbage for lines, none
// for TCP).
func (j *injector) request(corruptRate float64) fate {
	j.mu.Lock()
	defer j.mu.Unlock()
	var out fate
	out.drop = j.hit(j.f.Drop)
	if j.hit(j.f.Slow) {
		out.delay = j.f.SlowBy
	}
	out.corrupt = j.hit(corruptRate)
	return out
}

// linkDown tells whether the scheduled outage is on at clock time t: the
// link is away for the last LinkDown of every LinkEvery since the epoch.
func (j *injector) linkDown(t time.Time) bool {
	every, down := j.f.LinkEvery, j.f.LinkDown
	if every <= 0 || down <= 0 {
		return false
	}
	return t.Sub(j.epoch)%every >= every-down
}

// nextLinkChange is the clock time at which linkDown next changes after t.
func (j *injector) nextLinkChange(t time.Time) time.Time {
	every, down := j.f.LinkEvery, j.f.LinkDown
	el := t.Sub(j.epoch)
	base := el - el%every
	if el%every < every-down {
		return j.epoch.Add(base + every - down)
	}
	return j.epoch.Add(base + every)
}

// value applies the stuck and spike faults to a sample. A stuck value
// repeats the sample from when it stuck; a spike throws every value of one
// reply off by a fifth of its span.
func (j *injector) value(s Sample, p params, d devParams) Sample {
	j.mu.Lock()
	defer j.mu.Unlock()
	if s.At.Before(j.stuckUntil) {
		frozen := j.stuck
		frozen.At = s.At
		return frozen
	}
	if j.hit(j.f.Stuck) {
		j.stuck, j.stuckUntil = s, s.At.Add(j.f.StuckFor)
		return s
	}
	if j.hit(j.f.Spike) {
		sign := 1.0
		if j.rng.IntN(2) == 0 {
			sign = -1
		}
		s.Reference += sign * spikeFraction * p.refUnit.FromPa(p.maxPa)
		s.Device += sign * spikeFraction * d.devUnit.FromPa(d.upper-d.lower)
		s.Current = min(max(s.Current+sign*spikeFraction*16, 3.8), 20.5)
	}
	return s
}
