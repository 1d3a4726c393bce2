package backtest

import (
	"fmt"
	"os"
	"strconv"
	"strings"
	"time"

	"sigs.k8s.io/yaml"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/internal/engine/schedule"
)

// PolicyFile is a list of policies to compare, in YAML or JSON:
//
//	policies:
//	- name: weekly
//	  schedule: {cron: "30 2 * * 1", timeZone: Europe/London}
//	- name: auc-0.80-6h
//	  triggers: [{name: auc, below: 0.80, forSeconds: 21600, everySeconds: 300}]
//	  cooldownSeconds: 86400
type PolicyFile struct {
	Policies []Policy `json:"policies"`
}

// LoadPolicies reads a policy file, refusing unknown fields.
func LoadPolicies(path string) ([]Policy, error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, inputErr("--policies: %w", err)
	}
	var f PolicyFile
	if err := yaml.UnmarshalStrict(raw, &f); err != nil {
		return nil, inputErr("--policies %s: %w", path, err)
	}
	for i := range f.Policies {
		if err := Validate(f.Policies[i], fmt.Sprintf("policies[%d]", i)); err != nil {
			return nil, inputErr("--policies %s: %w", path, err)
		}
	}
	return f.Policies, nil
}

// FromLine takes the retraining policy of a ModelLine manifest: its
// schedule, triggers, cooldown and fresh-data minimum. The history is one
// series, so the triggers that watch it must be named when the line has
// more than one (keep); the others are left out.
func FromLine(path string, keep []string) (Policy, error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return Policy{}, inputErr("--line: %w", err)
	}
	var line v1alpha1.ModelLine
	if err := yaml.Unmarshal(raw, &line); err != nil {
		return Policy{}, inputErr("--line %s: %w", path, err)
	}
	if line.Kind != "ModelLine" {
		return Policy{}, inputErr("--line %s: kind %q; want a ModelLine manifest", path, line.Kind)
	}
	p := Policy{Name: "line " + line.Name, Schedule: line.Spec.Schedule, CooldownSeconds: line.Spec.CooldownSeconds}
	var names []string
	for _, t := range line.Spec.Triggers {
		names = append(names, t.Name)
	}
	switch {
	case len(keep) == 0 && len(line.Spec.Triggers) > 1:
		return Policy{}, inputErr("--line %s: the line has %d triggers (%s) and the history is one series: name the ones that watch it with --line-triggers", path, len(names), strings.Join(names, ", "))
	case len(keep) == 0:
		p.Triggers = line.Spec.Triggers
	}
	for _, k := range keep {
		found := false
		for _, t := range line.Spec.Triggers {
			if t.Name == k {
				p.Triggers, found = append(p.Triggers, t), true
			}
		}
		if !found {
			return Policy{}, inputErr("--line-triggers: the line has no trigger %q; its triggers are %s", k, strings.Join(names, ", "))
		}
	}
	// The line's label delay is each trigger's unless it has its own.
	for i := range p.Triggers {
		if p.Triggers[i].LabelDelaySeconds == nil && line.Spec.Labels != nil && line.Spec.Labels.DelaySeconds != nil {
			d := *line.Spec.Labels.DelaySeconds
			p.Triggers[i].LabelDelaySeconds = &d
		}
	}
	if c := line.Spec.Checks; c != nil && c.FreshData != nil {
		at := c.FreshData.AtLeast
		p.FreshDataAtLeast = &at
	}
	if err := Validate(p, "--line "+path); err != nil {
		return Policy{}, inputErr("%w", err)
	}
	return p, nil
}

// Validate checks a policy, naming the field at fault.
func Validate(p Policy, at string) error {
	if p.Name == "" {
		return fmt.Errorf("%s.name: name the policy", at)
	}
	if s := p.Schedule; s != nil {
		if _, err := schedule.Compute(s.Cron, s.TimeZone, time.Unix(0, 0), time.Unix(0, 0), nil); err != nil {
			return fmt.Errorf("%s (%s).%w", at, p.Name, err)
		}
	}
	for i, t := range p.Triggers {
		f := fmt.Sprintf("%s (%s).triggers[%d]", at, p.Name, i)
		switch {
		case (t.Below == nil) == (t.Above == nil):
			return fmt.Errorf("%s: set exactly one of below and above", f)
		case t.EverySeconds <= 0:
			return fmt.Errorf("%s.everySeconds: want a period above 0", f)
		case t.ForSeconds < t.EverySeconds:
			return fmt.Errorf("%s.forSeconds: %d is shorter than everySeconds %d", f, t.ForSeconds, t.EverySeconds)
		case t.LabelDelaySeconds != nil && *t.LabelDelaySeconds < 0:
			return fmt.Errorf("%s.labelDelaySeconds: %d; want 0 or more", f, *t.LabelDelaySeconds)
		}
	}
	if c := p.CUSUM; c != nil && (c.K < 0 || c.H <= 0) {
		return fmt.Errorf("%s (%s).cusum: want k of 0 or more and h above 0", at, p.Name)
	}
	if p.Schedule == nil && len(p.Triggers) == 0 && p.CUSUM == nil && p.Name != "none" {
		return fmt.Errorf("%s (%s): no schedule, trigger or cusum: the policy would never retrain", at, p.Name)
	}
	return nil
}

// ParseTrigger reads a trigger from a flag: below=0.8,for=6h,every=5m
// (or above=...; name=... and delay=2h, its label delay, optional).
func ParseTrigger(s string) (Policy, error) {
	t := v1alpha1.TriggerSpec{Name: "trigger", EverySeconds: 300}
	for _, part := range strings.Split(s, ",") {
		k, v, ok := strings.Cut(strings.TrimSpace(part), "=")
		if !ok {
			return Policy{}, fmt.Errorf("%q: want key=value, such as below=0.8,for=6h,every=5m", part)
		}
		switch k {
		case "below", "above":
			f, err := strconv.ParseFloat(v, 64)
			if err != nil {
				return Policy{}, fmt.Errorf("%s=%q: not a number", k, v)
			}
			if k == "below" {
				t.Below = &f
			} else {
				t.Above = &f
			}
		case "for", "every":
			d, err := time.ParseDuration(v)
			if err != nil || d < time.Second {
				return Policy{}, fmt.Errorf("%s=%q: want a duration such as 6h or 5m", k, v)
			}
			if k == "for" {
				t.ForSeconds = int32(d.Seconds())
			} else {
				t.EverySeconds = int32(d.Seconds())
			}
		case "delay":
			d, err := time.ParseDuration(v)
			if err != nil || d < 0 {
				return Policy{}, fmt.Errorf("delay=%q: want the label delay as a duration such as 2h (0 for labels at once)", v)
			}
			secs := int32(d.Seconds())
			t.LabelDelaySeconds = &secs
		case "name":
			t.Name = v
		default:
			return Policy{}, fmt.Errorf("%q: unknown key %q; want below, above, for, every, delay or name", part, k)
		}
	}
	p := Policy{Name: "trigger " + s, Triggers: []v1alpha1.TriggerSpec{t}}
	if err := Validate(p, "--trigger"); err != nil {
		return Policy{}, err
	}
	return p, nil
}

// ParseCUSUM reads a CUSUM policy from a flag: k=0.005,h=0.05[,target=0.84].
func ParseCUSUM(s string) (Policy, error) {
	r := CUSUMRule{}
	seen := map[string]bool{}
	for _, part := range strings.Split(s, ",") {
		k, v, ok := strings.Cut(strings.TrimSpace(part), "=")
		f, err := strconv.ParseFloat(v, 64)
		if !ok || err != nil {
			return Policy{}, fmt.Errorf("%q: want key=number, such as k=0.005,h=0.05", part)
		}
		switch k {
		case "k":
			r.K = f
		case "h":
			r.H = f
		case "target":
			r.Target = &f
		default:
			return Policy{}, fmt.Errorf("%q: unknown key %q; want k, h or target", part, k)
		}
		seen[k] = true
	}
	if !seen["k"] || !seen["h"] {
		return Policy{}, fmt.Errorf("%q: give both k and h", s)
	}
	p := Policy{Name: "cusum " + s, CUSUM: &r}
	if err := Validate(p, "--cusum"); err != nil {
		return Policy{}, err
	}
	return p, nil
}
