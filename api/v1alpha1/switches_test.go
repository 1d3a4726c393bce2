package v1alpha1

import "testing"

// Under Manual nothing serves that a person did not approve, except the
// rollback to a version that served before, unless the line says otherwise;
// under Automatic every switch is the controller's to take.
func TestAllows(t *testing.T) {
	yes, no := true, false
	all := []UnattendedSwitch{SwitchFirstImport, SwitchRollback, SwitchRuleBasedFallback, SwitchAlternatives}
	cases := []struct {
		name string
		gate GateSpec
		want map[UnattendedSwitch]bool
	}{
		{"Automatic", GateSpec{Approval: ApprovalAutomatic},
			map[UnattendedSwitch]bool{SwitchFirstImport: true, SwitchRollback: true, SwitchRuleBasedFallback: true, SwitchAlternatives: true}},
		{"unset approval is Automatic", GateSpec{},
			map[UnattendedSwitch]bool{SwitchFirstImport: true, SwitchRollback: true, SwitchRuleBasedFallback: true, SwitchAlternatives: true}},
		{"Manual", GateSpec{Approval: ApprovalManual},
			map[UnattendedSwitch]bool{SwitchFirstImport: false, SwitchRollback: true, SwitchRuleBasedFallback: false, SwitchAlternatives: false}},
		{"Manual with an empty withoutApproval", GateSpec{Approval: ApprovalManual, WithoutApproval: &UnattendedSwitches{}},
			map[UnattendedSwitch]bool{SwitchFirstImport: false, SwitchRollback: true, SwitchRuleBasedFallback: false, SwitchAlternatives: false}},
		{"Manual allowing the rule-based fallback, not the rollback",
			GateSpec{Approval: ApprovalManual, WithoutApproval: &UnattendedSwitches{RuleBasedFallback: &yes, Rollback: &no}},
			map[UnattendedSwitch]bool{SwitchFirstImport: false, SwitchRollback: false, SwitchRuleBasedFallback: true, SwitchAlternatives: false}},
		{"Automatic with the alternatives and the first import left to a person",
			GateSpec{Approval: ApprovalAutomatic, WithoutApproval: &UnattendedSwitches{Alternatives: &no, FirstImport: &no}},
			map[UnattendedSwitch]bool{SwitchFirstImport: false, SwitchRollback: true, SwitchRuleBasedFallback: true, SwitchAlternatives: false}},
	}
	for _, c := range cases {
		for _, s := range all {
			if got := c.gate.Allows(s); got != c.want[s] {
				t.Errorf("%s: Allows(%s) = %v, want %v", c.name, s, got, c.want[s])
			}
		}
	}
}
