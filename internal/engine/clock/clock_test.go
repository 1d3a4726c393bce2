package clock

import (
	"testing"
	"time"

	clocktesting "k8s.io/utils/clock/testing"
)

func TestScaled(t *testing.T) {
	origin := time.Date(2026, 11, 2, 0, 0, 0, 0, time.UTC)
	s := NewScaled(origin, 3600) // an hour a second
	time.Sleep(20 * time.Millisecond)
	el := s.Since(origin)
	if el < 60*time.Second || el > 10*time.Minute {
		t.Errorf("after 20ms real, %s passed; want about 72s", el)
	}
	if d := s.Delay(time.Hour); d != time.Second {
		t.Errorf("Delay(1h) = %s, want 1s", d)
	}
	before := s.Now()
	s.Jump(24 * time.Hour)
	if s.Now().Sub(before) < 24*time.Hour {
		t.Error("Jump did not move the clock")
	}
}

func TestManualAndReal(t *testing.T) {
	at := time.Date(2026, 11, 2, 9, 30, 0, 0, time.UTC)
	m := Manual{clocktesting.NewFakePassiveClock(at)}
	if !m.Now().Equal(at) || m.Delay(time.Minute) != time.Minute {
		t.Error("manual clock")
	}
	if (Real{}).Delay(time.Minute) != time.Minute {
		t.Error("real clock delay")
	}
}
