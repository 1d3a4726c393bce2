// Package v1alpha1 holds the plumbline.dev/v1alpha1 API: ModelLine, one model
// that is served, retrained and guarded, and ModelVersion, one candidate or
// released version of a line.
//
// Decimals (thresholds, minimums, confidences) are float64. The values they are
// compared with are float64 too: PromQL sample values and the gate report's
// statistics. CEL rules compare them as numbers (a validated decimal string
// would need parsing in every rule), and a person writes a plain number in
// YAML. Nothing is summed from them, so float rounding never accumulates.
// This is why controller-gen runs with crd:allowDangerousTypes=true.
//
// +kubebuilder:object:generate=true
// +groupName=plumbline.dev
package v1alpha1

import (
	"k8s.io/apimachinery/pkg/runtime/schema"
	"sigs.k8s.io/controller-runtime/pkg/scheme"
)

var (
	// GroupVersion is the group and version of the plumbline API.
	GroupVersion = schema.GroupVersion{Group: "plumbline.dev", Version: "v1alpha1"}

	// SchemeBuilder adds the plumbline types to a scheme.
	SchemeBuilder = &scheme.Builder{GroupVersion: GroupVersion}

	// AddToScheme adds the plumbline types to a scheme.
	AddToScheme = SchemeBuilder.AddToScheme
)
