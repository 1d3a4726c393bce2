// Package policy holds the rules that decide whether a retrain starts: the
// order of the checks and what each outcome means, and when a firing
// trigger may start one at all (nothing in flight, the cooldown over). The
// controller decides with these functions, and plumbline backtest replays
// history with the same ones, so a backtest says what the controller would
// have done.
package policy

import (
	"fmt"
	"strings"
	"time"

	"plumbline.dev/plumbline/internal/engine/promq"
)

// The paths by which a retrain is asked for.
const (
	PathManual   = "Manual"
	PathSchedule = "Schedule"
	PathTrigger  = "Trigger"
	// PathEarlyWarning: the early warning, when the line lets drifting
	// inputs ask for a retrain.
	PathEarlyWarning = "EarlyWarning"
)

// Outcomes of the decision whether to start a retrain.
const (
	Started              = "Started"
	DataQualityIssue     = "DataQualityIssue"
	DegradedWithoutDrift = "DegradedWithoutDrift"
	InsufficientData     = "InsufficientData"
	ChecksUnknown        = "ChecksUnknown"
	InFlight             = "InFlight"
	Cooldown             = "Cooldown"
	LiveTooRecent        = "LiveTooRecent"
)

// DefaultCooldown is the cooldown when a line sets none.
const DefaultCooldown = time.Hour

// Check is the outcome of one check: a PromQL query, or an answer of a
// check Job's report.
type Check struct {
	Kind, Name string
	Known      bool
	Breached   bool
	Value      float64
	Series     string
	Err        string
	// Text says what a known check found, when a value does not.
	Text string
}

func (c Check) String() string {
	if c.Known && c.Text != "" {
		return c.Text
	}
	where := ""
	if c.Series != "" && c.Series != "{}" {
		where = " " + c.Series
	}
	if !c.Known {
		return fmt.Sprintf("%s check %s could not be judged: %s", c.Kind, c.Name, c.Err)
	}
	return fmt.Sprintf("%s check %s%s is %s", c.Kind, c.Name, where, promq.Format(c.Value))
}

// Checks are the outcomes of a line's checks before a start.
type Checks struct {
	DataQuality []Check
	Drift       []Check
	FreshData   *Check // nil when the line has no fresh-data check
	AtLeast     float64
}

// Verdict is whether to start a retrain, and why not.
type Verdict struct {
	Outcome string
	Message string
}

// DecideStart judges the checks in order: any data-quality breach blocks the
// retrain (fix the data first); for a trigger, a quality drop that no drift
// check explains needs a person; too few fresh labelled rows are not worth
// training on. A check that cannot be judged never leads to an action: the
// start waits. With no drift checks configured, drift is not required.
func DecideStart(path string, cr Checks) Verdict {
	var unknown []string
	for _, c := range cr.DataQuality {
		if c.Known && c.Breached {
			return Verdict{DataQualityIssue, c.String() + ": retraining on broken data is refused; fix the data first"}
		}
		if !c.Known {
			unknown = append(unknown, c.String())
		}
	}
	if len(unknown) > 0 {
		return Verdict{ChecksUnknown, strings.Join(unknown, "; ")}
	}
	if path == PathTrigger && len(cr.Drift) > 0 {
		drifted, unknownDrift := false, []string{}
		for _, c := range cr.Drift {
			drifted = drifted || c.Known && c.Breached
			if !c.Known {
				unknownDrift = append(unknownDrift, c.String())
			}
		}
		switch {
		case !drifted && len(unknownDrift) > 0:
			return Verdict{ChecksUnknown, strings.Join(unknownDrift, "; ")}
		case !drifted:
			var seen []string
			for _, c := range cr.Drift {
				seen = append(seen, c.String())
			}
			return Verdict{DegradedWithoutDrift, "quality dropped but no drift check found the inputs shifted (" + strings.Join(seen, "; ") + "): retraining on the same kind of data is unlikely to help; a person should look"}
		}
	}
	if f := cr.FreshData; f != nil {
		switch {
		case !f.Known:
			return Verdict{ChecksUnknown, f.String()}
		case f.Breached:
			return Verdict{InsufficientData, fmt.Sprintf("%s, below the %s new labelled rows worth training on", f.String(), promq.Format(cr.AtLeast))}
		}
	}
	return Verdict{Started, "checks passed"}
}

// TriggerMayStart says whether a firing trigger may start a retrain now:
// not while a version is in flight (InFlight), nor within the cooldown of
// the last retrain, whatever started it (Cooldown), nor while the trigger's
// window still reaches back before the live version went live (a promotion
// or a rollback at liveSince): such a window judges the version that was
// replaced, so the trigger waits for a full window of the live one
// (LiveTooRecent).
func TriggerMayStart(inFlight bool, lastRetrain *time.Time, cooldown time.Duration, liveSince *time.Time, window time.Duration, now time.Time) (string, bool) {
	switch {
	case inFlight:
		return InFlight, false
	case lastRetrain != nil && now.Before(lastRetrain.Add(cooldown)):
		return Cooldown, false
	case liveSince != nil && now.Before(liveSince.Add(window)):
		return LiveTooRecent, false
	}
	return "", true
}

// CooldownOf is a line's cooldown from spec.cooldownSeconds.
func CooldownOf(seconds *int32) time.Duration {
	if seconds == nil {
		return DefaultCooldown
	}
	return time.Duration(*seconds) * time.Second
}
