package v1alpha1

import (
	"os"
	"regexp"
	"slices"
	"strings"
	"testing"
)

// The CEL rule on GateCriterion lists the known metrics by name; this test
// fails when that list and the Go table drift apart.
func TestCELMetricListMatchesTable(t *testing.T) {
	src, err := os.ReadFile("modelline_types.go")
	if err != nil {
		t.Fatal(err)
	}
	m := regexp.MustCompile(`self\.metric in \[([^\]]*)\]`).FindSubmatch(src)
	if m == nil {
		t.Fatal("no 'self.metric in [...]' rule found on GateCriterion")
	}
	var inRule []string
	for _, q := range strings.Split(string(m[1]), ",") {
		inRule = append(inRule, strings.Trim(strings.TrimSpace(q), "'"))
	}
	slices.Sort(inRule)
	table := KnownMetrics()
	slices.Sort(table)
	if !slices.Equal(inRule, table) {
		t.Errorf("CEL rule lists %v, table has %v", inRule, table)
	}
}

func TestEffectiveBetter(t *testing.T) {
	cases := []struct {
		c    GateCriterion
		want Better
	}{
		{GateCriterion{Metric: "accuracy"}, HigherBetter},
		{GateCriterion{Metric: "rmse"}, LowerBetter},
		{GateCriterion{Metric: "log_loss"}, LowerBetter},
		{GateCriterion{Metric: "revenue_loss", Better: LowerBetter}, LowerBetter},
		{GateCriterion{Metric: "rmse", Better: HigherBetter}, HigherBetter},
	}
	for _, tc := range cases {
		if got := tc.c.EffectiveBetter(); got != tc.want {
			t.Errorf("%+v: got %s, want %s", tc.c, got, tc.want)
		}
	}
}
