package ctl

import (
	"context"
	"fmt"
	"io"
	"strings"
	"time"

	"k8s.io/apimachinery/pkg/api/meta"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/util/duration"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/policy"
	"plumbline.dev/plumbline/internal/engine/trigger"
)

func runExplain(ctx context.Context, e *env, pos []string) error {
	l, vs, err := e.lineAndVersions(ctx, pos[0])
	if err != nil {
		return err
	}
	explain(e.out, l, vs, e.o.now())
	return nil
}

// explain writes a line's decision chain in plain words: what serves, what
// could start a retrain and what holds one back (with the controller's own
// rule, policy.StepTriggers, on the line's status), what the line waits
// for, and what a person could do. It reads only the line's status and its
// versions, so it says what the controller last saw.
func explain(w io.Writer, l *v1alpha1.ModelLine, vs []v1alpha1.ModelVersion, now time.Time) {
	st := &l.Status
	version := func(name string) *v1alpha1.ModelVersion {
		for i := range vs {
			if vs[i].Name == name {
				return &vs[i]
			}
		}
		return nil
	}
	when := func(t time.Time) string {
		d := t.Sub(now)
		if d >= 0 {
			return fmt.Sprintf("%s (in %s)", t.UTC().Format(time.RFC3339), duration.HumanDuration(d))
		}
		return fmt.Sprintf("%s (%s ago)", t.UTC().Format(time.RFC3339), duration.HumanDuration(-d))
	}
	c := func(typ string) *metav1.Condition { return meta.FindStatusCondition(st.Conditions, typ) }
	isTrue := func(typ string) bool { x := c(typ); return x != nil && x.Status == metav1.ConditionTrue }
	say := func(format string, a ...any) { fmt.Fprintf(w, "  "+format+"\n", a...) }

	fmt.Fprintf(w, "ModelLine %s/%s\n\nNow\n", l.Namespace, l.Name)
	if live := version(st.LiveVersion); live != nil {
		since := ""
		if t := live.Status.PromotedTime; t != nil {
			since = ", live since " + when(t.Time)
		}
		instead := ""
		if st.PreviousVersion != "" {
			instead = ", in place of " + st.PreviousVersion
		}
		say("%s serves (%s%s%s).", live.Name, live.Spec.Source, since, instead)
	} else {
		say("Nothing serves yet.")
	}
	if r := c(v1alpha1.ConditionReady); r != nil {
		say("Ready is %s (%s): %s", r.Status, r.Reason, oneLine(r.Message))
	}
	if isTrue(v1alpha1.ConditionFallbackActive) {
		say("A fallback serves: %s", oneLine(c(v1alpha1.ConditionFallbackActive).Message))
	}
	switch g := st.Guard; {
	case l.Spec.Guard == nil:
		say("No guard watches the live version (spec.guard is not set).")
	case g == nil:
		say("The guard has not judged the live version yet.")
	default:
		say("The guard on %s is %s: %s", g.Name, g.State, oneLine(g.Message))
	}
	if l.Spec.Suspend {
		say("spec.suspend is true: the controller reports but starts, promotes and rolls back nothing.")
	}

	fmt.Fprintln(w, "\nWhat can start a retrain")
	last := "none yet"
	if st.LastRetrainRequest != "" {
		last = "the last one handled: " + st.LastRetrainRequest
	}
	say("A person: kubectl plumbline retrain %s -n %s (%s).", l.Name, l.Namespace, last)
	switch s := l.Spec.Schedule; {
	case s == nil:
		say("No schedule.")
	case s.Suspend:
		say("The schedule %q is suspended.", s.Cron)
	default:
		next := "not computed yet"
		if st.NextScheduleTime != nil {
			next = when(st.NextScheduleTime.Time)
		}
		zone := ""
		if s.TimeZone != "" {
			zone = " (" + s.TimeZone + ")"
		}
		say("The schedule %q%s: next start at %s.", s.Cron, zone, next)
	}
	if len(l.Spec.Triggers) == 0 {
		say("No triggers.")
	}
	var firing []policy.Firing
	for _, spec := range l.Spec.Triggers {
		var ts *v1alpha1.TriggerStatus
		for i := range st.Triggers {
			if st.Triggers[i].Name == spec.Name {
				ts = &st.Triggers[i]
			}
		}
		if ts == nil {
			say("Trigger %s: not evaluated yet.", spec.Name)
			continue
		}
		since := ""
		if ts.Since != nil {
			since = " since " + when(ts.Since.Time)
		}
		say("Trigger %s is %s%s (value %s): %s", spec.Name, ts.State, since, dash(ts.Value), oneLine(ts.Message))
		if ts.State == v1alpha1.TriggerFiring {
			// As the controller: a whole window of the live version's
			// predictions, with their labels in.
			w := trigger.Window{For: time.Duration(spec.ForSeconds) * time.Second, Delay: l.Spec.LabelDelay(spec.LabelDelaySeconds)}
			firing = append(firing, policy.Firing{Name: spec.Name, Window: w.Reach()})
		}
	}
	if ch := l.Spec.Checks; ch != nil && ch.EarlyWarning != nil {
		acts := "it reports only"
		if ch.EarlyWarning.Retrain {
			acts = "while it is True a retrain may start (earlyWarning.retrain)"
		}
		if ic := c(v1alpha1.ConditionInputsDrifted); ic != nil {
			say("The early warning: InputsDrifted=%s (%s), %s: %s", ic.Status, ic.Reason, acts, oneLine(ic.Message))
		} else {
			say("The early warning: not judged yet; %s.", acts)
		}
	}

	fmt.Fprintln(w, "\nWhat holds a retrain back")
	held := false
	var lastRetrain, liveSince *time.Time
	if t := st.LastRetrainTime; t != nil {
		lastRetrain = &t.Time
	}
	if t := st.LastPromotionTime; t != nil {
		liveSince = &t.Time
	}
	cooldown := policy.CooldownOf(l.Spec.CooldownSeconds)
	if step, ok := policy.StepTriggers(firing, st.ActiveVersion != "", lastRetrain, cooldown, liveSince, now); ok {
		held = true
		switch step.Outcome {
		case policy.InFlight:
			say("Trigger %s asks for a retrain, but %s is in flight: a line works on one version at a time.", step.Trigger, st.ActiveVersion)
		case policy.Cooldown:
			say("Trigger %s asks for a retrain, but the line cools down: the last retrain started at %s, and a trigger may start the next one %s later, at %s.",
				step.Trigger, lastRetrain.UTC().Format(time.RFC3339), cooldown, when(lastRetrain.Add(cooldown)))
		case policy.LiveTooRecent:
			say("Trigger %s asks for a retrain, but the live version went live at %s: its window must lie wholly after that, with the labels of its predictions in, at %s, so it judges the live version and not the one before.",
				step.Trigger, liveSince.UTC().Format(time.RFC3339), when(step.Wake))
		default:
			say("Trigger %s asks for a retrain and nothing in the sequence holds it back: the checks run next.", step.Trigger)
		}
	}
	if b := c(v1alpha1.ConditionBlocked); b != nil && b.Status != metav1.ConditionFalse {
		held = true
		say("The checks (Blocked=%s, %s): %s", b.Status, b.Reason, oneLine(b.Message))
	}
	if ck := st.LastCheck; ck != nil {
		say("The last check Job %s (for %s) found data quality %s and drift %s in %d rows.", ck.Job, dash(ck.Reason), dash(string(ck.DataQuality)), dash(string(ck.Drift)), ck.Rows)
	}
	if !held {
		say("Nothing: no trigger fires, and no check refused a start.")
	}

	fmt.Fprintln(w, "\nWhat the line waits for")
	waits := false
	if a := version(st.ActiveVersion); a != nil {
		waits = true
		say("%s is %s: %s", a.Name, dash(string(a.Status.Phase)), oneLine(a.Status.Message))
	}
	if live := version(st.LiveVersion); live != nil && l.Spec.Guard != nil && live.Status.PromotedTime != nil {
		end := l.Spec.ProbationEnd(live.Status.PromotedTime.Time)
		if now.Before(end) {
			waits = true
			say("The guard may roll %s back until its probation ends at %s.", live.Name, when(end))
		}
	}
	if !waits {
		say("Nothing: no version is in flight.")
	}

	fmt.Fprintln(w, "\nWhat a person could do")
	if a := c(v1alpha1.ConditionActionRequired); a != nil && a.Status == metav1.ConditionTrue {
		for _, part := range strings.Split(a.Message, "; ") {
			say("- %s", oneLine(part))
		}
		return
	}
	say("Nothing is needed. To retrain now: kubectl plumbline retrain %s -n %s. To serve another version: kubectl plumbline rollback %s --to VERSION -n %s (kubectl plumbline history %s lists them).",
		l.Name, l.Namespace, l.Name, l.Namespace, l.Name)
}
