// Package jobenv names the environment variables the controller sets in
// every container of the Jobs it runs (training, evaluation, check), the
// contract between a line and the programs in its Job templates. The
// controller sets them; plumbline's own tools (evaluate, the demo's jobs)
// read them; a team's trainer reads them too.
package jobenv

// Every Job.
const (
	// Line is the ModelLine's name.
	Line = "PLUMBLINE_LINE"
	// Reason is what asked for the Job: Schedule, Trigger/<name>, Manual,
	// Initial.
	Reason = "PLUMBLINE_REASON"
	// DataFrom and DataTo bound the data window (RFC 3339): from the end of
	// the last training's window (empty: all history) to when the Job was
	// made.
	DataFrom = "PLUMBLINE_DATA_FROM"
	DataTo   = "PLUMBLINE_DATA_TO"
)

// Training and evaluation Jobs: the version they are for.
const (
	Version     = "PLUMBLINE_VERSION"
	ArtifactURI = "PLUMBLINE_ARTIFACT_URI"
)

// Evaluation Jobs: what to compare, and what the line's criteria judge (so
// plumbline evaluate reports just that without the template repeating the
// criteria).
const (
	CandidateURI   = "PLUMBLINE_CANDIDATE_URI"
	BaselineURI    = "PLUMBLINE_BASELINE_URI"
	GateMetrics    = "PLUMBLINE_GATE_METRICS"
	GateSegments   = "PLUMBLINE_GATE_SEGMENTS"
	GateConfidence = "PLUMBLINE_GATE_CONFIDENCE"
)

// Check Jobs: the batch the live version learned from (the reference).
const (
	LiveVersion   = "PLUMBLINE_LIVE_VERSION"
	ReferenceFrom = "PLUMBLINE_REFERENCE_FROM"
	ReferenceTo   = "PLUMBLINE_REFERENCE_TO"
)
