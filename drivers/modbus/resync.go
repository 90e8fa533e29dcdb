package modbus

import (
	"errors"
	"strings"
	"sync/atomic"
	"time"

	mb "github.com/simonvetter/modbus"
)

// An RTU frame carries no transaction id (on a serial port, and through a
// TCP serial gateway alike), so a reply that comes after the client's
// time-out stays in the input and the next exchange reads it as its own:
// a reply from another unit fails that exchange and leaves its own reply
// behind for the one after, and so on; a reply from the same unit is taken
// as the new value. The library throws the input away after a damaged frame
// but not after a time-out or a reply from the wrong unit. So after any of
// those the line is out of step: before the next request the late reply is
// let finish arriving and is thrown away, by closing and opening the client
// again (Open discards what the input holds; through a gateway the old
// connection takes its bytes with it).
//
// A unit that left its previous request unanswered too is taken to be off
// (unplugged, cut): waiting out a grace on every one of its time-outs would
// hold the whole line for it. Its time-out then holds back only its own
// next request, for the grace; the others go on after the input is thrown
// away. Should it answer late after all, the reply carries its unit id, so
// another unit's request fails on it (bad unit id) rather than taking it,
// and the line waits out a grace as above.

// maxGrace caps the wait for a late reply, so that one slow unit does not
// stop a line of several for long.
const maxGrace = 2 * time.Second

// longestFrame is the longest RTU frame, in characters: an RTU ADU is at
// most 256 bytes (Modbus over Serial Line V1.02; REFERENCES.md, from
// memory [M]; the library reads no longer frame either).
const longestFrame = 256

// resync is what a link knows of its line's step. until is read without
// holding the bus (a request waits out the grace before it queues), so it is
// atomic; it and dirty are written only while holding it.
type resync struct {
	rtu     bool
	serial  bool
	grace   time.Duration
	born    time.Time    // monotonic origin of until
	until   atomic.Int64 // a late reply may come until born+until, for any request
	dirty   bool         // the input may hold a stale reply: reopen before the next request
	resyncs atomic.Uint64
}

func (s *resync) init(o LinkOptions) {
	s.rtu, s.serial = o.Serial || strings.HasPrefix(o.URL, "rtuovertcp://"), o.Serial
	s.grace, s.born = graceFor(o), time.Now()
}

// graceFor is how long after a failed exchange a late reply is waited for:
// the link's time-out once more, since the time-out is what the line's
// units are known to answer within, so a reply up to twice as late as
// allowed still gets in (capped at maxGrace); on a serial port, plus the
// time the longest frame takes to cross the line, so a reply that starts
// at the end of the grace finishes arriving before it is thrown away.
// Through a gateway the time-out already holds the serial side's time.
func graceFor(o LinkOptions) time.Duration {
	g := min(o.Timeout, maxGrace)
	if o.Serial && o.Baud > 0 {
		g += longestFrame * 11 * time.Second / time.Duration(o.Baud)
	}
	return g
}

// outOfStep tells the failures after which a late or unread reply may be in
// the input: no reply in time, a reply from another unit, a damaged or
// unexpected frame. An exception is a whole reply to this request.
func outOfStep(err error) bool {
	for _, e := range []error{mb.ErrRequestTimedOut, mb.ErrBadUnitId, mb.ErrBadCRC, mb.ErrShortFrame, mb.ErrProtocolError} {
		if errors.Is(err, e) {
			return true
		}
	}
	return false
}

// failed marks the line out of step after err from unit u's exchange.
func (l *link) failed(err error, u *unitState) {
	s := &l.step
	if !s.rtu || !outOfStep(err) {
		return
	}
	s.dirty = true
	if errors.Is(err, mb.ErrRequestTimedOut) && u.silent > 0 {
		u.late = time.Now().Add(s.grace) // taken to be off: only its own next request waits
		return
	}
	s.until.Store(int64(time.Since(s.born) + s.grace))
}

// waitFor is how long an ordinary request to unit must still wait, holding
// the line: the line's grace, or the unit's own when it was taken to be off.
// A unit's grace that has run leaves the input to be thrown away before its
// request, since its late reply may have come after the others' requests.
func (l *link) waitFor(unit uint8) time.Duration {
	if w := l.step.left(); w > 0 {
		return w
	}
	u := l.unitState(unit)
	if u.late.IsZero() {
		return 0
	}
	if w := time.Until(u.late); w > 0 {
		return w
	}
	u.late, l.step.dirty = time.Time{}, true
	return 0
}

// left is how much of the grace is still to run; zero when in step.
func (s *resync) left() time.Duration {
	u := s.until.Load()
	if u == 0 {
		return 0
	}
	return max(time.Duration(u)-time.Since(s.born), 0)
}

// resync brings an out-of-step line back in step before a request, holding
// the line. An ordinary request comes here after the grace (take waits it
// out); the line is then reopened and in step again.
//
// A vent does not wait for the grace: the vent must reach the wire, and a
// garbled reply to it is better than a late vent (the guard sends it again
// until it is confirmed, and a vent is the same request every time). On a
// serial port the vent still reopens the port first — a few milliseconds,
// and a local port cannot refuse — so the late reply that has arrived is
// gone before the vent goes out. Through a gateway it goes out on the open
// connection: a new one could be refused or slow, and then the vent would
// not go out at all. Either way the line stays out of step until the grace
// has run, so the next ordinary request still waits it out.
func (l *link) resync(urgent bool) error {
	s := &l.step
	if !s.dirty {
		return nil
	}
	over := s.left() <= 0
	if !over && !s.serial {
		return nil // only a vent gets here before the grace has run
	}
	s.dirty = !over
	n := s.resyncs.Add(1)
	l.log.Debug("modbus line out of step: input thrown away", "resyncs", n, "urgent", urgent, "grace_seconds", s.grace.Seconds())
	if err := l.client.Close(); err != nil {
		l.log.Debug("modbus close", "err", err)
	}
	l.up = false
	return l.open()
}
