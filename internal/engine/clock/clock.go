// Package clock is the controller's time: when things are due (Now) and how
// long to wait for a moment of that time in real time (Delay). The real clock
// waits as long as it says; a time-compressed clock (the demo) waits less; a
// manual clock (the tests) stands still until a test moves it.
package clock

import (
	"sync"
	"time"

	kclock "k8s.io/utils/clock"
)

// Clock tells the controller's time.
type Clock interface {
	kclock.PassiveClock
	// Delay is the real time to wait for d of this clock's time to pass.
	Delay(d time.Duration) time.Duration
}

// Real is the wall clock.
type Real struct{ kclock.RealClock }

// Delay is d.
func (Real) Delay(d time.Duration) time.Duration { return d }

// Manual wraps a clock a test sets by hand. Delay is d: nothing waits on it,
// the test moves the clock and wakes the controller.
type Manual struct{ kclock.PassiveClock }

// Delay is d.
func (Manual) Delay(d time.Duration) time.Duration { return d }

// Scaled runs factor times faster than the wall clock from origin on: the
// demo plays days in minutes with it.
type Scaled struct {
	mu        sync.Mutex
	origin    time.Time
	realStart time.Time
	factor    float64
}

// NewScaled starts a clock at origin that runs factor times faster than real
// time.
func NewScaled(origin time.Time, factor float64) *Scaled {
	return &Scaled{origin: origin, realStart: time.Now(), factor: factor}
}

// Now is origin plus factor times the real time since the clock started.
func (s *Scaled) Now() time.Time {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.origin.Add(time.Duration(float64(time.Since(s.realStart)) * s.factor))
}

// Since is Now minus t.
func (s *Scaled) Since(t time.Time) time.Duration { return s.Now().Sub(t) }

// Delay is d divided by the factor.
func (s *Scaled) Delay(d time.Duration) time.Duration {
	return time.Duration(float64(d) / s.factor)
}

// Jump moves the clock forward by d at once, keeping its pace.
func (s *Scaled) Jump(d time.Duration) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.origin = s.origin.Add(d)
}
