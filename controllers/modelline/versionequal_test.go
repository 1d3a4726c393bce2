package modelline

import (
	"reflect"
	"testing"
	"time"

	"k8s.io/apimachinery/pkg/api/equality"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

var metaTimeType = reflect.TypeOf(metav1.Time{})

// leaves visits every leaf of v (strings, numbers, booleans, times) in a
// fixed order, filling nil pointers and empty lists first (one element) so
// that every field of the type is reached. visit may change the leaf.
func leaves(v reflect.Value, visit func(reflect.Value)) {
	switch {
	case v.Type() == metaTimeType:
		visit(v)
	case v.Kind() == reflect.Pointer:
		if v.IsNil() {
			v.Set(reflect.New(v.Type().Elem()))
		}
		leaves(v.Elem(), visit)
	case v.Kind() == reflect.Struct:
		for i := range v.NumField() {
			leaves(v.Field(i), visit)
		}
	case v.Kind() == reflect.Slice:
		if v.Len() == 0 {
			v.Set(reflect.MakeSlice(v.Type(), 1, 1))
		}
		for i := range v.Len() {
			leaves(v.Index(i), visit)
		}
	default:
		visit(v)
	}
}

// bump changes a leaf to another value of its kind.
func bump(v reflect.Value, k int) {
	switch {
	case v.Type() == metaTimeType:
		v.Set(reflect.ValueOf(metav1.NewTime(time.Date(2026, 11, 2, 3, 0, k, 0, time.UTC))))
	case v.Kind() == reflect.String:
		v.SetString(v.String() + "x")
	case v.Kind() == reflect.Bool:
		v.SetBool(!v.Bool())
	case v.Kind() >= reflect.Int && v.Kind() <= reflect.Int64:
		v.SetInt(v.Int() + 1)
	default:
		panic("a leaf of kind " + v.Kind().String() + ": teach bump and versionStatusEqual about it")
	}
}

// Every field of a version's status, however deep, makes two statuses
// unequal: a field added to the type and not to versionStatusEqual fails
// here. The comparison agrees with equality.Semantic.DeepEqual each time.
func TestVersionStatusEqualSeesEveryField(t *testing.T) {
	var full v1alpha1.ModelVersionStatus
	n := 0
	leaves(reflect.ValueOf(&full).Elem(), func(v reflect.Value) { n++; bump(v, n) })
	if n < 30 {
		t.Fatalf("only %d leaves reached", n)
	}
	same := full.DeepCopy()
	if !versionStatusEqual(&full, same) || !equality.Semantic.DeepEqual(full, *same) {
		t.Fatal("a status and its copy differ")
	}
	for i := range n {
		changed := full.DeepCopy()
		k := 0
		leaves(reflect.ValueOf(changed).Elem(), func(v reflect.Value) {
			if k == i {
				bump(v, 100+i)
			}
			k++
		})
		if versionStatusEqual(&full, changed) {
			t.Errorf("leaf %d changed but the statuses compare equal:\n%+v\n%+v", i, full, *changed)
		}
		if equality.Semantic.DeepEqual(full, *changed) {
			t.Errorf("leaf %d: semantic equality sees no change either", i)
		}
	}
}

// Where the two notions of equal are loose, they agree: nil and empty
// lists, the same instant in two time zones, absent and present pointers.
func TestVersionStatusEqualAgreesWithSemantic(t *testing.T) {
	at := time.Date(2026, 11, 2, 3, 0, 0, 0, time.UTC)
	berlin := time.FixedZone("CET", 3600)
	cases := []struct{ a, b v1alpha1.ModelVersionStatus }{
		{v1alpha1.ModelVersionStatus{}, v1alpha1.ModelVersionStatus{Conditions: []metav1.Condition{}}},
		{v1alpha1.ModelVersionStatus{ArchivedTime: &metav1.Time{Time: at}}, v1alpha1.ModelVersionStatus{ArchivedTime: &metav1.Time{Time: at.In(berlin)}}},
		{v1alpha1.ModelVersionStatus{ArchivedTime: &metav1.Time{Time: at}}, v1alpha1.ModelVersionStatus{}},
		{v1alpha1.ModelVersionStatus{Gate: &v1alpha1.GateResult{}}, v1alpha1.ModelVersionStatus{Gate: &v1alpha1.GateResult{Criteria: []v1alpha1.CriterionResult{}}}},
		{v1alpha1.ModelVersionStatus{Gate: &v1alpha1.GateResult{}}, v1alpha1.ModelVersionStatus{}},
		{v1alpha1.ModelVersionStatus{Promotion: &v1alpha1.PromotionStatus{}}, v1alpha1.ModelVersionStatus{}},
		{v1alpha1.ModelVersionStatus{Conditions: []metav1.Condition{{Type: "Live", LastTransitionTime: metav1.NewTime(at)}}},
			v1alpha1.ModelVersionStatus{Conditions: []metav1.Condition{{Type: "Live", LastTransitionTime: metav1.NewTime(at.In(berlin))}}}},
	}
	for i, c := range cases {
		if got, want := versionStatusEqual(&c.a, &c.b), equality.Semantic.DeepEqual(c.a, c.b); got != want {
			t.Errorf("case %d: versionStatusEqual %v, semantic %v", i, got, want)
		}
	}
}
