package modelline

import (
	"strconv"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// summarize derives the line's status from its versions: which is live and
// which served before it, the last promotion and retrain, the version count,
// and the Retraining and AwaitingApproval conditions. The versions are the
// record; the line's status is a view of them.
func summarize(line *v1alpha1.ModelLine, vw *view, now metav1.Time) {
	st := &line.Status
	st.LiveVersion, st.PreviousVersion = "", ""
	if live := vw.live(); live != nil {
		st.LiveVersion = live.Name
		if live.Status.Promotion != nil {
			st.PreviousVersion = live.Status.Promotion.FromVersion
		}
		if t := live.Status.PromotedTime; t != nil && (st.LastPromotionTime == nil || st.LastPromotionTime.Before(t)) {
			st.LastPromotionTime = t.DeepCopy()
		}
	}
	st.ActiveVersion = ""
	if a := vw.active(); a != nil {
		st.ActiveVersion = a.Name
	}
	for _, v := range vw.versions {
		if n, err := strconv.ParseInt(v.Labels[numberLabel], 10, 32); err == nil && int32(n) > st.VersionCount {
			st.VersionCount = int32(n)
		}
		// A version's data window ends when its training started: the
		// line's last retrain is the newest of those, and nothing else
		// writes it.
		if t := v.Status.DataTo; t != nil && (st.LastRetrainTime == nil || st.LastRetrainTime.Before(t)) {
			st.LastRetrainTime = t.DeepCopy()
		}
	}
	if last := lastAutomaticRollback(vw); last != nil {
		st.LastRollbackTime = &metav1.Time{Time: *last}
	}
	setCondition(&st.Conditions, retrainingCondition(vw), line.Generation, now)
	setCondition(&st.Conditions, awaitingApprovalCondition(vw), line.Generation, now)
	setCondition(&st.Conditions, fallbackCondition(vw), line.Generation, now)
}
