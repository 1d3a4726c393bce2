package v1alpha1

import (
	batchv1 "k8s.io/api/batch/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

// Annotations and labels that plumbline reads or writes.
const (
	// RetrainRequestAnnotation on a ModelLine asks for a retrain; its value is a
	// token, and each distinct token acts once.
	RetrainRequestAnnotation = "plumbline.dev/retrain-request"
	// RollbackRequestAnnotation on a ModelLine asks to serve a named version
	// of the line again (an archived one, or the rule-based fallback): its
	// value is the version's name, optionally followed by "/" and a token
	// (late-risk-v4/2026-12-02T10:00). Each distinct value acts once, so a
	// token lets the same version be asked for again.
	RollbackRequestAnnotation = "plumbline.dev/rollback-to"
	// VersionAnnotation is stamped on the serving Deployment's pod template on
	// promotion, naming the ModelVersion it serves.
	VersionAnnotation = "plumbline.dev/version"
	// LineLabel names the ModelLine on every object the controller creates.
	LineLabel = "plumbline.dev/line"
	// VersionLabel names the ModelVersion on every Job the controller creates.
	VersionLabel = "plumbline.dev/version"
	// RoleLabel says what a Job is for: training, gate or check.
	RoleLabel = "plumbline.dev/role"
	// NumberLabel is a started version's sequence number in its line.
	NumberLabel = "plumbline.dev/number"
	// HistoryLabel marks a finished version that no longer bears on its
	// line's decisions: not live, not the one it replaced, not serving, not
	// the rule-based one, and not the newest of anything the line reads from
	// its versions (its last outcome, its last data window, its promotion
	// sequence). Its value is the version's phase (Archived, Rejected or
	// Failed). The manager keeps only the metadata of such versions in
	// memory and reads one in full when a person asks to serve it again; the
	// version itself is unchanged. Removing the label is harmless: the
	// manager sets it again.
	HistoryLabel = "plumbline.dev/history"
)

// ModelLineSpec is the desired behaviour of one model line.
//
// +kubebuilder:validation:XValidation:rule="!has(self.schedule) && (!has(self.triggers) || size(self.triggers) == 0) || has(self.training)",message="spec.training is required when spec.schedule or spec.triggers is set: there is nothing to run a retrain with"
type ModelLineSpec struct {
	// serving names the Deployment and container that serve the model.
	// +required
	Serving ServingSpec `json:"serving"`

	// training is how a new version is trained.
	// +optional
	Training *TrainingSpec `json:"training,omitempty"`

	// schedule starts a retrain on a cron schedule.
	// +optional
	Schedule *ScheduleSpec `json:"schedule,omitempty"`

	// triggers start a retrain when a monitored quality metric has held beyond a
	// threshold for a whole window.
	// +optional
	// +listType=map
	// +listMapKey=name
	// +kubebuilder:validation:MaxItems=16
	Triggers []TriggerSpec `json:"triggers,omitempty"`

	// checks run, in order, before every retrain, whatever starts it (a
	// person, the schedule or a trigger).
	// +optional
	Checks *ChecksSpec `json:"checks,omitempty"`

	// gate judges every candidate on the golden evaluation set.
	// +required
	Gate GateSpec `json:"gate"`

	// fallback says what the line may fall back to when the live version
	// regresses and retraining cannot help.
	// +optional
	Fallback *FallbackSpec `json:"fallback,omitempty"`

	// guard watches production quality after a promotion.
	// +optional
	Guard *GuardSpec `json:"guard,omitempty"`

	// labels says when the truth behind the quality series (whether a
	// parcel was in fact late) comes in: the line-wide label delay, which
	// triggers and the guard may override, and how the series are stamped.
	// +optional
	Labels *LabelsSpec `json:"labels,omitempty"`

	// cooldownSeconds is the least time between two trigger-started retrains.
	// +optional
	// +kubebuilder:default=3600
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=31536000
	CooldownSeconds *int32 `json:"cooldownSeconds,omitempty"`

	// historyLimit is how many archived, rejected or failed versions are kept.
	// +optional
	// +kubebuilder:default=10
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=1000
	HistoryLimit *int32 `json:"historyLimit,omitempty"`

	// suspend stops the controller from acting on this line: no retrains, no
	// promotions, no rollbacks. Status is still reported.
	// +optional
	Suspend bool `json:"suspend,omitempty"`
}

// LabelsSpec says when the labels behind quality series arrive.
type LabelsSpec struct {
	// delaySeconds is how long after a prediction its label is in; the
	// default for every trigger and the guard. A window judges the
	// predictions that have their labels: it ends delaySeconds ago.
	// +optional
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=2592000
	DelaySeconds *int32 `json:"delaySeconds,omitempty"`

	// stampedAt says what a quality point's timestamp means.
	// Prediction (the default): when the predictions it scores were made, so
	// a point is final delaySeconds after its time, and the range query is
	// moved back by the delay, as PromQL offset would.
	// Scoring: when it was scored, from the labels that had come in (a
	// gauge an evaluator exports as labels arrive); such a point scores the
	// predictions of delaySeconds before it, so the range query ends now and
	// only the period judged and the waits after a promotion move.
	// +optional
	// +kubebuilder:default=Prediction
	StampedAt LabelStamp `json:"stampedAt,omitempty"`
}

// LabelStamp is what a quality point's timestamp means.
// +kubebuilder:validation:Enum=Prediction;Scoring
type LabelStamp string

const (
	// StampedAtPrediction: a point is stamped with the time of the
	// predictions it scores.
	StampedAtPrediction LabelStamp = "Prediction"
	// StampedAtScoring: a point is stamped when it was scored.
	StampedAtScoring LabelStamp = "Scoring"
)

// LabelCount is the least number of labelled predictions a window needs.
type LabelCount struct {
	// query is a PromQL expression for the number of labelled predictions
	// in the window judged, asked as an instant query at the window's end
	// (for example sum(increase(larkspur_labelled_predictions_total{line="{{.Line}}"}[30m]))).
	// The same placeholders as the window's own query.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=4096
	Query string `json:"query"`

	// atLeast is the least number of labelled predictions a window is judged
	// on; with fewer the result is Unknown, never Inactive or Firing.
	// +required
	// +kubebuilder:validation:Minimum=1
	AtLeast float64 `json:"atLeast"`
}

// ServingSpec names where the live model is served.
type ServingSpec struct {
	// deploymentName is the Deployment, in the line's namespace, that serves the
	// model.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=253
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?(\.[a-z0-9]([-a-z0-9]*[a-z0-9])?)*$`
	DeploymentName string `json:"deploymentName"`

	// containerName is the container, in that Deployment's pod template, that
	// loads the model.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=63
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?$`
	ContainerName string `json:"containerName"`

	// artifactEnv is the environment variable of that container that holds the
	// served version's artifact URI.
	// +optional
	// +kubebuilder:default=MODEL_URI
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=128
	// +kubebuilder:validation:Pattern=`^[A-Za-z_][A-Za-z0-9_]*$`
	ArtifactEnv string `json:"artifactEnv,omitempty"`
}

// TrainingSpec is how a new version is trained.
type TrainingSpec struct {
	// jobTemplate is the training Job. Every container gets PLUMBLINE_LINE,
	// PLUMBLINE_VERSION, PLUMBLINE_ARTIFACT_URI, PLUMBLINE_REASON,
	// PLUMBLINE_DATA_FROM and PLUMBLINE_DATA_TO.
	// +required
	JobTemplate batchv1.JobTemplateSpec `json:"jobTemplate"`

	// artifactURI is a Go template for where the trained artifact goes, with
	// {{.Line}}, {{.Version}} and {{.Number}}; for example
	// s3://models/{{.Line}}/{{.Number}}.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=2048
	ArtifactURI string `json:"artifactURI"`
}

// ScheduleSpec starts retrains on a cron schedule.
type ScheduleSpec struct {
	// cron is a standard 5-field cron expression (minute hour day-of-month
	// month day-of-week), or a descriptor such as @daily.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=128
	Cron string `json:"cron"`

	// timeZone is the IANA time zone the cron expression is read in, for
	// example Europe/London. Empty means UTC.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	TimeZone string `json:"timeZone,omitempty"`

	// startingDeadlineSeconds is how late a missed start may still run. A start
	// missed by more is skipped. Unset means no deadline.
	// +optional
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=31536000
	StartingDeadlineSeconds *int64 `json:"startingDeadlineSeconds,omitempty"`

	// suspend pauses the schedule only; triggers still act.
	// +optional
	Suspend bool `json:"suspend,omitempty"`
}

// TriggerSpec starts a retrain when a PromQL query has held beyond a threshold
// for a whole window.
//
// +kubebuilder:validation:XValidation:rule="has(self.below) != has(self.above)",message="set exactly one of below and above"
// +kubebuilder:validation:XValidation:rule="self.forSeconds >= self.everySeconds",message="forSeconds must be at least everySeconds: the window must hold more than one evaluation"
type TriggerSpec struct {
	// name identifies the trigger in status, events and version reasons.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=63
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?$`
	Name string `json:"name"`

	// query is a PromQL expression that yields the monitored value.
	// It may be a template: {{.Line}}, {{.Namespace}} and {{.Version}} (the
	// live version) are replaced before it is sent, so one shape of query
	// serves many lines.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=4096
	Query string `json:"query"`

	// below fires the trigger when the value stays below this.
	// +optional
	Below *float64 `json:"below,omitempty"`

	// above fires the trigger when the value stays above this.
	// +optional
	Above *float64 `json:"above,omitempty"`

	// forSeconds is how long the value must stay beyond the threshold.
	// +required
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=2592000
	ForSeconds int32 `json:"forSeconds"`

	// everySeconds is how often the trigger is evaluated.
	// +optional
	// +kubebuilder:default=60
	// +kubebuilder:validation:Minimum=10
	// +kubebuilder:validation:Maximum=86400
	EverySeconds int32 `json:"everySeconds,omitempty"`

	// labelDelaySeconds overrides spec.labels.delaySeconds for this trigger.
	// +optional
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=2592000
	LabelDelaySeconds *int32 `json:"labelDelaySeconds,omitempty"`

	// enoughLabels: a window with fewer labelled predictions than this asks
	// is Unknown, so "no labels yet" is never taken for "quality is fine".
	// +optional
	EnoughLabels *LabelCount `json:"enoughLabels,omitempty"`
}

// ChecksSpec are the checks run before every retrain, whatever starts it,
// in order: data quality, drift (judged for a trigger-started retrain only),
// fresh data.
//
// +kubebuilder:validation:XValidation:rule="!has(self.freshData) || has(self.freshData.query) || has(self.jobTemplate)",message="freshData.query is required unless a jobTemplate check Job counts the rows: set freshData.query, or add jobTemplate"
// +kubebuilder:validation:XValidation:rule="!has(self.earlyWarning) || (has(self.drift) && size(self.drift) > 0)",message="earlyWarning watches the drift checks: add at least one to checks.drift, or remove earlyWarning"
type ChecksSpec struct {
	// dataQuality checks: any breach blocks the retrain (fix the data first).
	// +optional
	// +listType=map
	// +listMapKey=name
	// +kubebuilder:validation:MaxItems=32
	DataQuality []QueryCheck `json:"dataQuality,omitempty"`

	// drift checks: a breach means the inputs drifted. A quality drop with no
	// drift is not retrained on; it needs a person's review.
	// +optional
	// +listType=map
	// +listMapKey=name
	// +kubebuilder:validation:MaxItems=32
	Drift []QueryCheck `json:"drift,omitempty"`

	// freshData checks that there are enough new labelled rows to train on.
	// +optional
	FreshData *FreshDataCheck `json:"freshData,omitempty"`

	// jobTemplate optionally runs a check Job (plumbline datacheck) whose report
	// feeds the same outcomes as the PromQL checks: its data-quality answer
	// joins dataQuality, its drift answer joins drift, and the rows it saw
	// count as fresh data when freshData has no query. The Job gets the
	// window a retrain would train on (PLUMBLINE_DATA_FROM, PLUMBLINE_DATA_TO)
	// and the live version's (PLUMBLINE_REFERENCE_FROM, PLUMBLINE_REFERENCE_TO).
	// +optional
	JobTemplate *batchv1.JobTemplateSpec `json:"jobTemplate,omitempty"`

	// earlyWarning runs the drift checks on their own interval, as the
	// early sign of a drop whose labels are not in yet: drifting inputs
	// raise the InputsDrifted condition and an event, naming the checks that
	// drifted. They start nothing unless earlyWarning.retrain asks.
	// +optional
	EarlyWarning *EarlyWarningSpec `json:"earlyWarning,omitempty"`
}

// EarlyWarningSpec is how often the inputs are watched, and whether their
// drift may ask for a retrain.
type EarlyWarningSpec struct {
	// everySeconds is how often the drift checks run for the early warning.
	// +optional
	// +kubebuilder:default=300
	// +kubebuilder:validation:Minimum=10
	// +kubebuilder:validation:Maximum=86400
	EverySeconds int32 `json:"everySeconds,omitempty"`

	// retrain asks for a retrain when the inputs drift (version reason
	// EarlyWarning), through the usual start sequence: one version at a
	// time, the cooldown, the data-quality and fresh-data checks and the
	// check Job. Off by default: drifting inputs alone start nothing.
	// +optional
	Retrain bool `json:"retrain,omitempty"`
}

// QueryCheck is a PromQL check, breached when its value is below or above a
// threshold.
//
// +kubebuilder:validation:XValidation:rule="has(self.below) != has(self.above)",message="set exactly one of below and above"
type QueryCheck struct {
	// name identifies the check in conditions and events.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=63
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?$`
	Name string `json:"name"`

	// query is a PromQL expression.
	// It may be a template: {{.Line}}, {{.Namespace}} and {{.Version}} (the
	// live version) are replaced before it is sent, so one shape of query
	// serves many lines.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=4096
	Query string `json:"query"`

	// below: the check is breached when the value is below this.
	// +optional
	Below *float64 `json:"below,omitempty"`

	// above: the check is breached when the value is above this.
	// +optional
	Above *float64 `json:"above,omitempty"`
}

// FreshDataCheck requires enough new labelled rows.
type FreshDataCheck struct {
	// query is a PromQL expression that yields the number of new labelled rows
	// since the last training. Without it, the rows the check Job
	// (jobTemplate) saw are counted.
	// It may be a template: {{.Line}}, {{.Namespace}} and {{.Version}} (the
	// live version) are replaced before it is sent, so one shape of query
	// serves many lines.
	// +optional
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=4096
	Query string `json:"query,omitempty"`

	// atLeast is the least number of rows worth training on.
	// +required
	// +kubebuilder:validation:Minimum=0
	AtLeast float64 `json:"atLeast"`
}

// ApprovalMode says whether a candidate that passed the gate needs a person.
// +kubebuilder:validation:Enum=Automatic;Manual
type ApprovalMode string

const (
	// ApprovalAutomatic promotes a candidate as soon as it passes the gate.
	ApprovalAutomatic ApprovalMode = "Automatic"
	// ApprovalManual waits for a person to set spec.decision on the version.
	ApprovalManual ApprovalMode = "Manual"
)

// GateSpec judges candidates on the golden evaluation set.
type GateSpec struct {
	// jobTemplate is the evaluation Job. Besides the training variables it gets
	// PLUMBLINE_CANDIDATE_URI and PLUMBLINE_BASELINE_URI. Its last container
	// writes the gate report to its termination message.
	// +required
	JobTemplate batchv1.JobTemplateSpec `json:"jobTemplate"`

	// criteria the candidate must meet, all of them.
	// +required
	// +listType=atomic
	// +kubebuilder:validation:MinItems=1
	// +kubebuilder:validation:MaxItems=32
	Criteria []GateCriterion `json:"criteria"`

	// approval: Automatic promotes a passing candidate; Manual waits for a
	// person's decision on the version. Under Manual nothing serves that a
	// person did not approve, except what withoutApproval allows.
	// +optional
	// +kubebuilder:default=Automatic
	Approval ApprovalMode `json:"approval,omitempty"`

	// withoutApproval says which of the controller's own switches may change
	// what serves without a person's decision. Each is on by default under
	// Automatic approval; under Manual only rollback is (the previous
	// version served before, so a person approved it then).
	// +optional
	WithoutApproval *UnattendedSwitches `json:"withoutApproval,omitempty"`
}

// UnattendedSwitches are the controller's automatic actions that change what
// serves, each allowed (true) or left to a person (false). Unset takes the
// approval mode's default.
type UnattendedSwitches struct {
	// firstImport: the first Imported version of a line with nothing live
	// goes live without a gate. When false it waits for spec.decision.
	// Default: true under Automatic, false under Manual.
	// +optional
	FirstImport *bool `json:"firstImport,omitempty"`

	// rollback: the guard rolls a regressed version back to the previous
	// one. When false the line asks a person (NeedsReview). Default: true.
	// +optional
	Rollback *bool `json:"rollback,omitempty"`

	// ruleBasedFallback: the guard switches a regressed version to the
	// rule-based version. When false the line asks a person. Default: true
	// under Automatic, false under Manual.
	// +optional
	RuleBasedFallback *bool `json:"ruleBasedFallback,omitempty"`

	// alternatives: when a retrain cannot help, the line switches to the
	// best alternative that passed the gate. When false the alternatives are
	// still evaluated, and the line names the best one to a person. Default:
	// true under Automatic, false under Manual.
	// +optional
	Alternatives *bool `json:"alternatives,omitempty"`
}

// UnattendedSwitch names one of UnattendedSwitches.
type UnattendedSwitch string

// The automatic switches, by their field names.
const (
	SwitchFirstImport       UnattendedSwitch = "firstImport"
	SwitchRollback          UnattendedSwitch = "rollback"
	SwitchRuleBasedFallback UnattendedSwitch = "ruleBasedFallback"
	SwitchAlternatives      UnattendedSwitch = "alternatives"
)

// Allows reports whether the gate lets the controller take switch s without
// a person: the field when set, else the approval mode's default.
func (g GateSpec) Allows(s UnattendedSwitch) bool {
	var set *bool
	if w := g.WithoutApproval; w != nil {
		switch s {
		case SwitchFirstImport:
			set = w.FirstImport
		case SwitchRollback:
			set = w.Rollback
		case SwitchRuleBasedFallback:
			set = w.RuleBasedFallback
		case SwitchAlternatives:
			set = w.Alternatives
		}
	}
	if set != nil {
		return *set
	}
	return g.Approval != ApprovalManual || s == SwitchRollback
}

// Better says which way a metric improves: Higher or Lower values are the
// better ones.
// +kubebuilder:validation:Enum=Higher;Lower
type Better string

const (
	// HigherBetter metrics: accuracy, ROC AUC, R2, ...
	HigherBetter Better = "Higher"
	// LowerBetter metrics: log loss, RMSE, ...
	LowerBetter Better = "Lower"
)

// GateCriterion is one thing a candidate must meet on the golden set.
//
// +kubebuilder:validation:XValidation:rule="has(self.minimum) || has(self.maximum) || has(self.maxRegression)",message="set at least one of minimum, maximum and maxRegression: a criterion with none judges nothing"
// +kubebuilder:validation:XValidation:rule="!has(self.confidence) || (self.confidence > 0.5 && self.confidence < 1.0)",message="confidence must be strictly between 0.5 and 1, for example 0.95"
// +kubebuilder:validation:XValidation:rule="has(self.better) || self.metric in ['accuracy','balanced_accuracy','precision','recall','f1','f1_macro','f1_micro','f1_weighted','mcc','roc_auc','average_precision','log_loss','brier','mae','rmse','mape','r2']",message="metric is not one that plumbline evaluate reports: set better (Higher or Lower) so the gate knows which way is better"
type GateCriterion struct {
	// metric is the name of a metric in the gate report, for example accuracy,
	// roc_auc or rmse.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=63
	// +kubebuilder:validation:Pattern=`^[a-z][a-z0-9_]*$`
	Metric string `json:"metric"`

	// segment of the golden set: empty is the whole set, "*" every segment in
	// the report, anything else that one segment.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	Segment string `json:"segment,omitempty"`

	// better says which way the metric improves: Higher (accuracy, ROC AUC)
	// or Lower (log loss, RMSE). Optional for the metrics plumbline evaluate
	// reports, whose way is known.
	// +optional
	Better Better `json:"better,omitempty"`

	// minimum the candidate's value must reach (for metrics where higher is
	// better).
	// +optional
	Minimum *float64 `json:"minimum,omitempty"`

	// maximum the candidate's value must not exceed (for metrics where lower is
	// better).
	// +optional
	Maximum *float64 `json:"maximum,omitempty"`

	// maxRegression is the largest loss against the live version that is
	// tolerated: the confidence interval of the difference must not reach
	// beyond it (non-inferiority). 0 asks that the candidate be no worse.
	// +optional
	// +kubebuilder:validation:Minimum=0
	MaxRegression *float64 `json:"maxRegression,omitempty"`

	// confidence of the non-inferiority judgement; the report's interval must
	// be computed at this confidence or higher.
	// +optional
	// +kubebuilder:default=0.95
	Confidence *float64 `json:"confidence,omitempty"`
}

// FallbackSpec is what the line may fall back to.
type FallbackSpec struct {
	// previous allows rolling back to the previous good version.
	// +optional
	// +kubebuilder:default=true
	Previous *bool `json:"previous,omitempty"`

	// ruleBasedVersion names a ModelVersion of this line whose source is
	// RuleBased, served when no model version can be.
	// +optional
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=253
	// +kubebuilder:validation:Pattern=`^[a-z0-9]([-a-z0-9]*[a-z0-9])?(\.[a-z0-9]([-a-z0-9]*[a-z0-9])?)*$`
	RuleBasedVersion string `json:"ruleBasedVersion,omitempty"`
}

// GuardSpec watches production quality after a promotion.
//
// +kubebuilder:validation:XValidation:rule="has(self.below) != has(self.above)",message="set exactly one of below and above"
// +kubebuilder:validation:XValidation:rule="self.forSeconds >= self.everySeconds",message="forSeconds must be at least everySeconds: the window must hold more than one evaluation"
// +kubebuilder:validation:XValidation:rule="self.probationSeconds >= self.forSeconds",message="probationSeconds must be at least forSeconds: a shorter probation can never see a sustained regression"
type GuardSpec struct {
	// query is a PromQL expression for production quality. It may be a
	// template: {{.Line}}, {{.Namespace}} and {{.Version}} (the version on
	// probation, the live one) are replaced before it is sent, so the guard
	// can judge the series of the version it guards alone.
	// +required
	// +kubebuilder:validation:MinLength=1
	// +kubebuilder:validation:MaxLength=4096
	Query string `json:"query"`

	// below: a regression is the value staying below this.
	// +optional
	Below *float64 `json:"below,omitempty"`

	// above: a regression is the value staying above this.
	// +optional
	Above *float64 `json:"above,omitempty"`

	// forSeconds is how long the value must stay beyond the threshold to count
	// as a regression.
	// +required
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=2592000
	ForSeconds int32 `json:"forSeconds"`

	// everySeconds is how often the guard is evaluated.
	// +optional
	// +kubebuilder:default=60
	// +kubebuilder:validation:Minimum=10
	// +kubebuilder:validation:Maximum=86400
	EverySeconds int32 `json:"everySeconds,omitempty"`

	// probationSeconds after a promotion, a regression rolls back
	// automatically; after it, a regression only raises Degraded.
	// +required
	// +kubebuilder:validation:Minimum=1
	// +kubebuilder:validation:Maximum=31536000
	ProbationSeconds int32 `json:"probationSeconds"`

	// labelDelaySeconds overrides spec.labels.delaySeconds for this guard.
	// +optional
	// +kubebuilder:validation:Minimum=0
	// +kubebuilder:validation:Maximum=2592000
	LabelDelaySeconds *int32 `json:"labelDelaySeconds,omitempty"`

	// enoughLabels: a window with fewer labelled predictions than this asks
	// is Unknown, so "no labels yet" is never taken for "quality is fine".
	// +optional
	EnoughLabels *LabelCount `json:"enoughLabels,omitempty"`
}

// TriggerState is what a trigger's last evaluation found.
// +kubebuilder:validation:Enum=Inactive;Pending;Firing;Unknown
type TriggerState string

const (
	// TriggerInactive: the value is within the threshold.
	TriggerInactive TriggerState = "Inactive"
	// TriggerPending: the value is beyond the threshold, not yet for the whole
	// window.
	TriggerPending TriggerState = "Pending"
	// TriggerFiring: the value has been beyond the threshold for the whole
	// window.
	TriggerFiring TriggerState = "Firing"
	// TriggerUnknown: the value could not be judged (query error, no data, too
	// few points). Never acted on.
	TriggerUnknown TriggerState = "Unknown"
)

// TriggerStatus is the last state of one trigger.
type TriggerStatus struct {
	// name of the trigger.
	// +required
	// +kubebuilder:validation:MaxLength=63
	Name string `json:"name"`

	// state of the trigger.
	// +required
	State TriggerState `json:"state"`

	// since when the trigger has been in this state.
	// +optional
	Since *metav1.Time `json:"since,omitempty"`

	// value seen when the state last changed, as text (PromQL values can be NaN
	// or infinite, which JSON numbers cannot hold).
	// +optional
	// +kubebuilder:validation:MaxLength=64
	Value string `json:"value,omitempty"`

	// series that decided the state, when the query returned several.
	// +optional
	// +kubebuilder:validation:MaxLength=1024
	Series string `json:"series,omitempty"`

	// message explains the state, for example why it is Unknown.
	// +optional
	// +kubebuilder:validation:MaxLength=1024
	Message string `json:"message,omitempty"`
}

// CheckAnswer is one answer of a check Job's report.
// +kubebuilder:validation:Enum=OK;Failed;Detected;NotDetected;Unknown
type CheckAnswer string

const (
	CheckOK          CheckAnswer = "OK"
	CheckFailed      CheckAnswer = "Failed"
	CheckDetected    CheckAnswer = "Detected"
	CheckNotDetected CheckAnswer = "NotDetected"
	CheckUnknown     CheckAnswer = "Unknown"
)

// CheckRunStatus is a run of the line's check Job.
type CheckRunStatus struct {
	// number counts the line's check runs; it names their Jobs.
	// +required
	// +kubebuilder:validation:Minimum=1
	Number int32 `json:"number"`

	// job is the check Job.
	// +optional
	// +kubebuilder:validation:MaxLength=63
	Job string `json:"job,omitempty"`

	// reason is the retrain the check was run for: Schedule, Manual or
	// Trigger/<name>.
	// +optional
	// +kubebuilder:validation:MaxLength=128
	Reason string `json:"reason,omitempty"`

	// startedTime is when the Job was created.
	// +optional
	StartedTime *metav1.Time `json:"startedTime,omitempty"`

	// finishedTime is when its report was read.
	// +optional
	FinishedTime *metav1.Time `json:"finishedTime,omitempty"`

	// dataQuality is the report's data-quality answer: OK, Failed, or
	// Unknown when the Job failed or its report could not be used.
	// +optional
	DataQuality CheckAnswer `json:"dataQuality,omitempty"`

	// drift is the report's drift answer: Detected, NotDetected or Unknown.
	// +optional
	Drift CheckAnswer `json:"drift,omitempty"`

	// rows is how many rows the current batch had.
	// +optional
	Rows *int64 `json:"rows,omitempty"`

	// message sums up the report: the findings, the drifted features, or
	// why the report could not be used.
	// +optional
	// +kubebuilder:validation:MaxLength=2048
	Message string `json:"message,omitempty"`

	// used says a decision on the retrain took this report; the next request
	// runs the Job again.
	// +optional
	Used bool `json:"used,omitempty"`
}

// AlternativesStatus is an evaluation of the line's alternatives against its
// live version on the golden set.
type AlternativesStatus struct {
	// number counts the line's evaluations of alternatives; it names their
	// Jobs.
	// +required
	// +kubebuilder:validation:Minimum=1
	Number int32 `json:"number"`

	// reason they were evaluated: InsufficientData or CandidateRejected.
	// +required
	// +kubebuilder:validation:MaxLength=128
	Reason string `json:"reason"`

	// against is the live version they were compared with.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	Against string `json:"against,omitempty"`

	// startedTime is when the evaluation began.
	// +optional
	StartedTime *metav1.Time `json:"startedTime,omitempty"`

	// candidates are the alternatives and how each fared.
	// +optional
	// +listType=atomic
	// +kubebuilder:validation:MaxItems=4
	Candidates []AlternativeResult `json:"candidates,omitempty"`

	// outcome once all are judged: Switched (to chosen), NoneQualified, or
	// LeftToPerson (the best passed, and spec.gate.withoutApproval leaves the
	// switch to a person); Superseded when the live version changed first.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	Outcome string `json:"outcome,omitempty"`

	// chosen is the alternative switched to.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	Chosen string `json:"chosen,omitempty"`
}

// AlternativeResult is how one alternative fared against the live version.
type AlternativeResult struct {
	// version is the alternative.
	// +required
	// +kubebuilder:validation:MaxLength=253
	Version string `json:"version"`

	// job is its evaluation Job.
	// +optional
	// +kubebuilder:validation:MaxLength=63
	Job string `json:"job,omitempty"`

	// verdict of the gate; empty while it runs.
	// +optional
	Verdict GateVerdict `json:"verdict,omitempty"`

	// score is the value of the first criterion's metric, as text, used to
	// choose between alternatives that both pass.
	// +optional
	// +kubebuilder:validation:MaxLength=64
	Score string `json:"score,omitempty"`

	// message explains the verdict.
	// +optional
	// +kubebuilder:validation:MaxLength=2048
	Message string `json:"message,omitempty"`
}

// ModelLine condition types.
const (
	// ConditionReady: a version serves, the controller runs the line
	// unattended, and nothing waits for a person. False while the spec is
	// invalid, something it names is missing, a permission is refused, a
	// person must act (ActionRequired), the line is suspended, the live
	// version is degraded, or nothing serves yet. A retrain under way does
	// not make a line unready.
	ConditionReady = "Ready"
	// ConditionActionRequired: True exactly when a person must act: a setup
	// problem, a candidate waiting for a decision, NeedsReview, Blocked, or
	// a regression after probation. Its reason names the first; its message
	// lists them all with what to do.
	ConditionActionRequired = "ActionRequired"
	// ConditionDegraded: production quality is below the guard's threshold.
	ConditionDegraded = "Degraded"
	// ConditionRetraining: a version is being trained or evaluated.
	ConditionRetraining = "Retraining"
	// ConditionAwaitingApproval: a candidate waits for a person's decision.
	ConditionAwaitingApproval = "AwaitingApproval"
	// ConditionFallbackActive: a fallback (previous or rule-based) serves.
	ConditionFallbackActive = "FallbackActive"
	// ConditionBlocked: a retrain was refused, for example on broken data.
	ConditionBlocked = "Blocked"
	// ConditionNeedsReview: the controller cannot decide and a person should.
	ConditionNeedsReview = "NeedsReview"
	// ConditionInputsDrifted: the early warning (spec.checks.earlyWarning)
	// finds the inputs moved while the quality of the latest predictions is
	// not known yet; it names the drift checks that breached.
	ConditionInputsDrifted = "InputsDrifted"
)

// ModelLine condition reasons.
const (
	// ReasonServing: Ready, a version serves and nothing waits for a person.
	ReasonServing = "Serving"
	// ReasonNothingLive: not Ready, no version serves yet.
	ReasonNothingLive = "NothingLive"
	// ReasonNothingRequired: ActionRequired is False, nothing waits for a
	// person.
	ReasonNothingRequired  = "NothingRequired"
	ReasonInvalidSpec      = "InvalidSpec"
	ReasonServingNotFound  = "ServingNotFound"
	ReasonFallbackNotFound = "FallbackNotFound"
	ReasonSuspended        = "Suspended"
	ReasonRolledBack       = "RolledBack"
	// ReasonPermissionDenied: the API server refused the manager a request
	// the line needs (its RBAC lacks a permission).
	ReasonPermissionDenied = "PermissionDenied"
)

// ModelLineStatus is what the controller last saw and did.
type ModelLineStatus struct {
	// observedGeneration is the generation of the spec last acted on.
	// +optional
	ObservedGeneration int64 `json:"observedGeneration,omitempty"`

	// liveVersion is the ModelVersion the serving Deployment serves.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	LiveVersion string `json:"liveVersion,omitempty"`

	// previousVersion is the version that served before the live one.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	PreviousVersion string `json:"previousVersion,omitempty"`

	// activeVersion is the version being trained, evaluated or promoted.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	ActiveVersion string `json:"activeVersion,omitempty"`

	// lastRetrainTime is when the training of the line's newest retrain
	// started, whatever asked for it (a retrain queued behind another counts
	// once its own training starts); triggers wait cooldownSeconds after it.
	// +optional
	LastRetrainTime *metav1.Time `json:"lastRetrainTime,omitempty"`

	// lastPromotionTime is when a version last went live.
	// +optional
	LastPromotionTime *metav1.Time `json:"lastPromotionTime,omitempty"`

	// lastScheduleTime is the last scheduled start that was acted on (started,
	// skipped or refused), or when the controller first saw the schedule.
	// +optional
	LastScheduleTime *metav1.Time `json:"lastScheduleTime,omitempty"`

	// nextScheduleTime is the next scheduled start.
	// +optional
	NextScheduleTime *metav1.Time `json:"nextScheduleTime,omitempty"`

	// lastRetrainRequest is the last retrain-request token handled.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	LastRetrainRequest string `json:"lastRetrainRequest,omitempty"`

	// versionCount is the number of versions created for this line; the next
	// trained version gets the next number.
	// +optional
	// +kubebuilder:validation:Minimum=0
	VersionCount int32 `json:"versionCount,omitempty"`

	// guard is the last state of the guard on the live version.
	// +optional
	Guard *TriggerStatus `json:"guard,omitempty"`

	// lastRollbackTime is when the guard last rolled back automatically; no
	// other automatic rollback happens within probationSeconds of it.
	// +optional
	LastRollbackTime *metav1.Time `json:"lastRollbackTime,omitempty"`

	// lastRollbackRequest is the last rollback-to request handled.
	// +optional
	// +kubebuilder:validation:MaxLength=253
	LastRollbackRequest string `json:"lastRollbackRequest,omitempty"`

	// lastCheck is the line's last check Job (spec.checks.jobTemplate) and
	// what its report said.
	// +optional
	LastCheck *CheckRunStatus `json:"lastCheck,omitempty"`

	// alternatives is the last evaluation of the line's alternatives (the
	// previous version, the rule-based one) against a degraded live version.
	// +optional
	Alternatives *AlternativesStatus `json:"alternatives,omitempty"`

	// triggers is the last state of each trigger.
	// +optional
	// +listType=map
	// +listMapKey=name
	// +kubebuilder:validation:MaxItems=16
	Triggers []TriggerStatus `json:"triggers,omitempty"`

	// conditions: Ready, ActionRequired, Degraded, Retraining,
	// AwaitingApproval, FallbackActive, Blocked, NeedsReview.
	// +optional
	// +listType=map
	// +listMapKey=type
	// +kubebuilder:validation:MaxItems=16
	Conditions []metav1.Condition `json:"conditions,omitempty"`
}

// ModelLine is one model that is served, retrained and guarded.
//
// +kubebuilder:object:root=true
// +kubebuilder:subresource:status
// +kubebuilder:resource:shortName=mline,categories=plumbline
// +kubebuilder:printcolumn:name="Live",type=string,JSONPath=`.status.liveVersion`
// +kubebuilder:printcolumn:name="Ready",type=string,JSONPath=`.status.conditions[?(@.type=="Ready")].status`
// +kubebuilder:printcolumn:name="Action Required",type=string,JSONPath=`.status.conditions[?(@.type=="ActionRequired")].status`
// +kubebuilder:printcolumn:name="Retraining",type=string,JSONPath=`.status.conditions[?(@.type=="Retraining")].status`
// +kubebuilder:printcolumn:name="Awaiting Approval",type=string,JSONPath=`.status.conditions[?(@.type=="AwaitingApproval")].status`
// +kubebuilder:printcolumn:name="Fallback",type=string,JSONPath=`.status.conditions[?(@.type=="FallbackActive")].status`
// +kubebuilder:printcolumn:name="Reason",type=string,priority=1,JSONPath=`.status.conditions[?(@.type=="Ready")].reason`
// +kubebuilder:printcolumn:name="Previous",type=string,priority=1,JSONPath=`.status.previousVersion`
// +kubebuilder:printcolumn:name="Next Schedule",type=string,priority=1,JSONPath=`.status.nextScheduleTime`
// +kubebuilder:printcolumn:name="Age",type=date,JSONPath=`.metadata.creationTimestamp`
type ModelLine struct {
	metav1.TypeMeta   `json:",inline"`
	metav1.ObjectMeta `json:"metadata,omitempty"`

	// +required
	Spec ModelLineSpec `json:"spec"`
	// +optional
	Status ModelLineStatus `json:"status,omitempty"`
}

// ModelLineList is a list of ModelLines.
//
// +kubebuilder:object:root=true
type ModelLineList struct {
	metav1.TypeMeta `json:",inline"`
	metav1.ListMeta `json:"metadata,omitempty"`
	Items           []ModelLine `json:"items"`
}

func init() {
	SchemeBuilder.Register(&ModelLine{}, &ModelLineList{})
}
