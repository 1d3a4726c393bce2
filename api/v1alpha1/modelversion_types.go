package v1alpha1

import (
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

// VersionSource is where a version comes from.
// +kubebuilder:validation:Enum=Trained;Imported;RuleBased
type VersionSource string

const (
	// SourceTrained: trained by the line's training Job.
	SourceTrained VersionSource = "Trained"
	// SourceImported: an artifact made elsewhere. The first one becomes live
	// when the line has none; later ones go through the gate.
	SourceImported VersionSource = "Imported"
	// SourceRuleBased: a simple rule-based model, the last-resort fallback.
	SourceRuleBased VersionSource = "RuleBased"
)

// Decision is a person's verdict on a candidate that waits for approval.
// +kubebuilder:validation:Enum=Approved;Rejected
type Decision string

const (
	// DecisionApproved lets a candidate that passed the gate be promoted.
	DecisionApproved Decision = "Approved"
	// DecisionRejected stops a candidate for good.
	DecisionRejected Decision = "Rejected"
)

// Version causes, in spec.cause. A trigger-started version has the cause
// "Trigger/<trigger name>".
const (
	ReasonSchedule      = "Schedule"
	ReasonManual        = "Manual"
	ReasonInitial       = "Initial"
	ReasonTriggerPrefix = "Trigger/"
	// ReasonEarlyWarning: the line's inputs drifted and its early warning
	// asks for a retrain (spec.checks.earlyWarning.retrain).
	ReasonEarlyWarning = "EarlyWarning"
)

// ModelVersionSpec describes one candidate or released version.
//
// +kubebuilder:validation:XValidation:rule="self.source != 'RuleBased' || has(self.artifactURI)",message="artifactURI is required for a RuleBased version: it is what the serving container loads"
// +kubebuilder:validation:XValidation:rule="self.source != 'Imported' || has(self.artifactURI)",message="artifactURI is required for an Imported version: it is what the serving container loads"
// +kubebuilder:validation:XValidation:rule="!has(oldSelf.decision) || (has(self.decision) && self.decision == oldSelf.decision)",message="decision cannot be changed or removed once made; create a new version instead"
// +kubebuilder:validation:XValidation:rule="!has(oldSelf.artifactURI) || (has(self.artifactURI) && self.artifactURI == oldSelf.artifactURI)",message="artifactURI cannot be changed once set: a version is one artifact; create a new version instead"
type ModelVersionSpec struct {
	// line is the ModelLine, in the same namespace, this version belongs to.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=253
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?(\.[a-z0-9]([-a-z0-9]*[a-z0-9])?)*$`
	// +kubebuilder:validation:XValidation:rule="self == oldSelf",message="line is immutable: a version belongs to one line for good"
	Line string `json:"line"`

	// source of the version: Trained, Imported or RuleBased.
	// +required
	// +kubebuilder:validation:XValidation:rule="self == oldSelf",message="source is immutable"
	Source VersionSource `json:"source"`

	// artifactURI is where the model artifact is. The controller fills it for a
	// Trained version from the line's spec.training.artifactURI.
	// +optional
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=2048
	ArtifactURI string `json:"artifactURI,omitempty"`

	// cause is what asked for the version: Schedule, Manual (a person's
	// request), Initial, Trigger/<trigger name>, or EarlyWarning (drifting
	// inputs, where the line lets them ask). (The version's status reason
	// says where it stands.)
	// +optional
	// +kubebuilder:validation:MaxLength=80
	// +kubebuilder:validation:Pattern=`^(Schedule|Manual|Initial|EarlyWarning|Trigger/[a-z0-9]([-a-z0-9]*[a-z0-9])?)$`
	Cause string `json:"cause,omitempty"`

	// decision is set by a person on a candidate that waits for approval:
	// Approved or Rejected. It cannot be changed once made.
	// +optional
	Decision Decision `json:"decision,omitempty"`

	// decisionNote says why, for the record.
	// +optional
	// +kubebuilder:validation:MaxLength=1024
	DecisionNote string `json:"decisionNote,omitempty"`
}

// VersionPhase is where a version is in its life, for kubectl get.
// +kubebuilder:validation:Enum=Pending;Training;Evaluating;AwaitingApproval;Promoting;Live;Archived;Rejected;Failed;Standby
type VersionPhase string

const (
	// PhasePending: waiting its turn (one version per line is in flight).
	PhasePending VersionPhase = "Pending"
	// PhaseTraining: the training Job runs.
	PhaseTraining VersionPhase = "Training"
	// PhaseEvaluating: the evaluation Job runs on the golden set.
	PhaseEvaluating VersionPhase = "Evaluating"
	// PhaseAwaitingApproval: passed the gate; waits for a person's decision.
	PhaseAwaitingApproval VersionPhase = "AwaitingApproval"
	// PhasePromoting: the serving Deployment rolls out to this version.
	PhasePromoting VersionPhase = "Promoting"
	// PhaseLive: the serving Deployment serves this version.
	PhaseLive VersionPhase = "Live"
	// PhaseArchived: served once, replaced since.
	PhaseArchived VersionPhase = "Archived"
	// PhaseRejected: failed the gate, or a person rejected it.
	PhaseRejected VersionPhase = "Rejected"
	// PhaseFailed: training or rollout failed.
	PhaseFailed VersionPhase = "Failed"
	// PhaseStandby: a RuleBased version held in reserve as the fallback.
	PhaseStandby VersionPhase = "Standby"
)

// InFlight reports whether a version in this phase is still on its way to
// Live: the phases of the one version per line the controller works on.
func (p VersionPhase) InFlight() bool {
	switch p {
	case "", PhasePending, PhaseTraining, PhaseEvaluating, PhaseAwaitingApproval, PhasePromoting:
		return true
	}
	return false
}

// Finished reports whether a version in this phase is done for good: the
// phases history pruning counts.
func (p VersionPhase) Finished() bool {
	switch p {
	case PhaseArchived, PhaseRejected, PhaseFailed:
		return true
	}
	return false
}

// ModelVersion condition types.
const (
	ConditionTrained    = "Trained"
	ConditionEvaluated  = "Evaluated"
	ConditionGatePassed = "GatePassed"
	ConditionApproved   = "Approved"
	ConditionLive       = "Live"
	// ConditionSettled is True once the version's way has ended, whatever
	// the outcome (Live, Archived, Rejected, Failed; Standby for a
	// rule-based version), with the outcome as its reason; False while it
	// is on its way. A script waits for it: kubectl wait
	// --for=condition=Settled modelversion/NAME.
	ConditionSettled = "Settled"
)

// GateVerdict is the controller's judgement of a candidate.
// +kubebuilder:validation:Enum=Passed;Failed
type GateVerdict string

const (
	GatePassed GateVerdict = "Passed"
	GateFailed GateVerdict = "Failed"
)

// CriterionResult is how a candidate fared on one criterion for one segment.
type CriterionResult struct {
	// metric of the criterion.
	// +required
	// +kubebuilder:validation:MaxLength=63
	Metric string `json:"metric"`

	// segment judged; empty is the whole set.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	Segment string `json:"segment,omitempty"`

	// passed is whether the candidate met the criterion.
	// +required
	Passed bool `json:"passed"`

	// candidate is the candidate's value, as text.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	Candidate string `json:"candidate,omitempty"`

	// baseline is the live version's value, as text.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	Baseline string `json:"baseline,omitempty"`

	// deltaLow is the lower end of the difference's interval, as text.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	DeltaLow string `json:"deltaLow,omitempty"`

	// deltaHigh is the upper end of the difference's interval, as text.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	DeltaHigh string `json:"deltaHigh,omitempty"`

	// message says what was required and what was found.
	// +optional
	// +kubebuilder:validation:MaxLength=1024
	Message string `json:"message,omitempty"`
}

// GateResult is the controller's judgement of the evaluation report.
type GateResult struct {
	// baselineVersion is the live version the candidate was compared with;
	// empty when the line had none.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	BaselineVersion string `json:"baselineVersion,omitempty"`

	// verdict: Passed or Failed.
	// +required
	Verdict GateVerdict `json:"verdict"`

	// reason in one CamelCase word, for example CriteriaNotMet or
	// ReportMalformed.
	// +optional
	// +kubebuilder:validation:MaxLength=128
	Reason string `json:"reason,omitempty"`

	// message explains the verdict.
	// +optional
	// +kubebuilder:validation:MaxLength=4096
	Message string `json:"message,omitempty"`

	// rows of the golden set the report was computed on.
	// +optional
	Rows int64 `json:"rows,omitempty"`

	// criteria results, one per criterion and segment judged.
	// +optional
	// +listType=atomic
	// +kubebuilder:validation:MaxItems=256
	Criteria []CriterionResult `json:"criteria,omitempty"`

	// mustPassFailed is the number of must-pass rows the candidate got wrong.
	// +optional
	MustPassFailed int32 `json:"mustPassFailed,omitempty"`

	// evaluatedTime is when the report was judged.
	// +optional
	EvaluatedTime *metav1.Time `json:"evaluatedTime,omitempty"`
}

// PromotionKind says why a version was rolled out.
// +kubebuilder:validation:Enum=Candidate;Rollback;Fallback;Alternative;Requested
type PromotionKind string

const (
	// PromotionCandidate: a new version that passed the gate.
	PromotionCandidate PromotionKind = "Candidate"
	// PromotionRollback: the guard rolled back to the version that served
	// before a regressed one.
	PromotionRollback PromotionKind = "Rollback"
	// PromotionFallback: the guard switched to the rule-based version.
	PromotionFallback PromotionKind = "Fallback"
	// PromotionAlternative: an older or rule-based version that beat the
	// degraded live one on the golden set.
	PromotionAlternative PromotionKind = "Alternative"
	// PromotionRequested: a person asked to go back to this version.
	PromotionRequested PromotionKind = "Requested"
)

// PromotionStatus records a rollout of the serving Deployment to this
// version, with what it replaced so a failed rollout can be undone.
type PromotionStatus struct {
	// kind says why the version was rolled out; empty means Candidate.
	// +optional
	Kind PromotionKind `json:"kind,omitempty"`

	// sequence orders the line's promotions: each one gets one more than
	// the highest before it. The live version is the Live one with the
	// highest sequence.
	// +optional
	// +kubebuilder:validation:Minimum=0
	Sequence int64 `json:"sequence,omitempty"`

	// fromVersion is the version that served before; empty when none did.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	FromVersion string `json:"fromVersion,omitempty"`

	// fromArtifactURI is the artifact the serving container had before.
	// +optional
	// +kubebuilder:validation:MaxLength=2048
	FromArtifactURI string `json:"fromArtifactURI,omitempty"`

	// startedTime is when the rollout began.
	// +optional
	StartedTime *metav1.Time `json:"startedTime,omitempty"`
}

// ModelVersionStatus is what happened to a version.
type ModelVersionStatus struct {
	// observedGeneration is the generation of the spec last acted on.
	// +optional
	ObservedGeneration int64 `json:"observedGeneration,omitempty"`

	// phase is where the version is in its life.
	// +optional
	Phase VersionPhase `json:"phase,omitempty"`

	// number is the version's sequence number within its line.
	// +optional
	Number int32 `json:"number,omitempty"`

	// trainingJob is the name of the training Job.
	// +optional
	// +kubebuilder:validation:MaxLength=63
	TrainingJob string `json:"trainingJob,omitempty"`

	// gateJob is the name of the evaluation Job.
	// +optional
	// +kubebuilder:validation:MaxLength=63
	GateJob string `json:"gateJob,omitempty"`

	// dataFrom and dataTo bound the training data window.
	// +optional
	DataFrom *metav1.Time `json:"dataFrom,omitempty"`
	// +optional
	DataTo *metav1.Time `json:"dataTo,omitempty"`

	// gate is the controller's judgement of the evaluation report.
	// +optional
	Gate *GateResult `json:"gate,omitempty"`

	// promotion records the rollout to this version.
	// +optional
	Promotion *PromotionStatus `json:"promotion,omitempty"`

	// reason says, in one CamelCase word, why the version is in its phase:
	// for example BackoffLimitExceeded, CriteriaNotMet, ReportMalformed,
	// RejectedByPerson, RolloutFailed or Replaced.
	// +optional
	// +kubebuilder:validation:MaxLength=128
	Reason string `json:"reason,omitempty"`

	// message says, in a sentence, where the version is and why.
	// +optional
	// +kubebuilder:validation:MaxLength=2048
	Message string `json:"message,omitempty"`

	// decisionTime is when the controller saw a person's decision.
	// +optional
	DecisionTime *metav1.Time `json:"decisionTime,omitempty"`

	// promotedTime is when the version went live.
	// +optional
	PromotedTime *metav1.Time `json:"promotedTime,omitempty"`

	// archivedTime is when the version stopped serving.
	// +optional
	ArchivedTime *metav1.Time `json:"archivedTime,omitempty"`

	// conditions: Trained, Evaluated, GatePassed, Approved, Live.
	// +optional
	// +listType=map
	// +listMapKey=type
	// +kubebuilder:validation:MaxItems=16
	Conditions []metav1.Condition `json:"conditions,omitempty"`
}

// ModelVersion is one candidate or released version of a model line.
//
// +kubebuilder:object:root=true
// +kubebuilder:subresource:status
// +kubebuilder:resource:shortName=mver,categories=plumbline
// +kubebuilder:printcolumn:name="Line",type=string,JSONPath=`.spec.line`
// +kubebuilder:printcolumn:name="Number",type=integer,JSONPath=`.status.number`
// +kubebuilder:printcolumn:name="Phase",type=string,JSONPath=`.status.phase`
// +kubebuilder:printcolumn:name="Reason",type=string,JSONPath=`.status.reason`
// +kubebuilder:printcolumn:name="Gate",type=string,JSONPath=`.status.gate.verdict`
// +kubebuilder:printcolumn:name="Cause",type=string,JSONPath=`.spec.cause`
// +kubebuilder:printcolumn:name="Source",type=string,priority=1,JSONPath=`.spec.source`
// +kubebuilder:printcolumn:name="Artifact",type=string,priority=1,JSONPath=`.spec.artifactURI`
// +kubebuilder:printcolumn:name="Message",type=string,priority=1,JSONPath=`.status.message`
// +kubebuilder:printcolumn:name="Age",type=date,JSONPath=`.metadata.creationTimestamp`
type ModelVersion struct {
	metav1.TypeMeta   `json:",inline"`
	metav1.ObjectMeta `json:"metadata,omitempty"`

	// +required
	Spec ModelVersionSpec `json:"spec"`
	// +optional
	Status ModelVersionStatus `json:"status,omitempty"`
}

// ModelVersionList is a list of ModelVersions.
//
// +kubebuilder:object:root=true
type ModelVersionList struct {
	metav1.TypeMeta `json:",inline"`
	metav1.ListMeta `json:"metadata,omitempty"`
	Items           []ModelVersion `json:"items"`
}

func init() {
	SchemeBuilder.Register(&ModelVersion{}, &ModelVersionList{})
}
