// Package modelversion ties each ModelVersion to its line: it adopts a
// version into the line it names (an owner reference, so deleting the line
// deletes its versions) and says so when that line does not exist. A
// version's lifecycle is driven by its line's reconciler (package
// modelline), which owns its status.
package modelversion

import (
	"context"
	"fmt"

	apierrors "k8s.io/apimachinery/pkg/api/errors"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/types"
	"k8s.io/client-go/tools/events"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/controller/controllerutil"
	"sigs.k8s.io/controller-runtime/pkg/handler"
	"sigs.k8s.io/controller-runtime/pkg/log"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"

	"plumbline.dev/plumbline/api/v1alpha1"
	"plumbline.dev/plumbline/controllers/index"
	"plumbline.dev/plumbline/internal/engine/clock"
)

// The permissions the manager needs, gathered into config/rbac by
// controller-gen.
// +kubebuilder:rbac:groups=plumbline.dev,resources=modelversions,verbs=get;list;watch;create;update;patch;delete
// +kubebuilder:rbac:groups=plumbline.dev,resources=modelversions/status,verbs=get;update;patch
// +kubebuilder:rbac:groups=plumbline.dev,resources=modelversions/finalizers,verbs=update

// Reconciler ties each version to its line and reports its phase.
type Reconciler struct {
	client.Client
	Clock    clock.Clock
	Recorder events.EventRecorder
}

// Reconcile adopts a version into its line (an owner reference, so deleting
// the line deletes its versions) and sets its first phase.
func (r *Reconciler) Reconcile(ctx context.Context, req ctrl.Request) (ctrl.Result, error) {
	var v v1alpha1.ModelVersion
	if err := r.Get(ctx, req.NamespacedName, &v); err != nil {
		return ctrl.Result{}, client.IgnoreNotFound(err)
	}
	orig := v.DeepCopy()

	var line v1alpha1.ModelLine
	lineKey := types.NamespacedName{Namespace: v.Namespace, Name: v.Spec.Line}
	lineErr := r.Get(ctx, lineKey, &line)
	if lineErr != nil && !apierrors.IsNotFound(lineErr) {
		return ctrl.Result{}, fmt.Errorf("get ModelLine %s of version %s: %w", lineKey, req.NamespacedName, lineErr)
	}
	lineFound := lineErr == nil

	if lineFound && !metav1.IsControlledBy(&v, &line) {
		if err := controllerutil.SetControllerReference(&line, &v, r.Scheme()); err != nil {
			// Another controller owns it: say so rather than fight over it.
			r.Recorder.Eventf(&v, &line, "Warning", "NotAdopted", "Adopt", "cannot adopt into line %q: %v", line.Name, err)
			return ctrl.Result{}, nil
		}
		if err := r.Patch(ctx, &v, client.MergeFrom(orig)); err != nil {
			return ctrl.Result{}, fmt.Errorf("adopt ModelVersion %s into line %s: %w", req.NamespacedName, line.Name, err)
		}
		orig = v.DeepCopy()
	}

	// The line's reconciler owns the status of its versions. A version
	// whose line does not exist has no one else to say so.
	if lineFound || v.Status.Phase != "" {
		return ctrl.Result{}, nil
	}
	v.Status.Phase = v1alpha1.PhasePending
	v.Status.Reason = "LineNotFound"
	v.Status.Message = fmt.Sprintf("ModelLine %q (spec.line) does not exist in namespace %q; the version waits for it", v.Spec.Line, v.Namespace)
	v.Status.ObservedGeneration = v.Generation
	// The optimistic lock keeps this from overwriting a status the line's
	// reconciler wrote meanwhile, had the line just appeared.
	if err := r.Status().Patch(ctx, &v, client.MergeFromWithOptions(orig, client.MergeFromWithOptimisticLock{})); err != nil {
		return ctrl.Result{}, fmt.Errorf("write status of ModelVersion %s: %w", req.NamespacedName, err)
	}
	r.Recorder.Eventf(&v, nil, "Warning", "LineNotFound", "Adopt", "%s", v.Status.Message)
	return ctrl.Result{}, nil
}

// SetupWithManager registers the reconciler and its watches. The index of
// versions by line is registered by the ModelLine reconciler.
func (r *Reconciler) SetupWithManager(mgr ctrl.Manager) error {
	return ctrl.NewControllerManagedBy(mgr).
		Named("modelversion").
		For(&v1alpha1.ModelVersion{}).
		// A line that appears late adopts the versions that named it.
		Watches(&v1alpha1.ModelLine{}, handler.EnqueueRequestsFromMapFunc(r.versionsOfLine)).
		Complete(r)
}

func (r *Reconciler) versionsOfLine(ctx context.Context, o client.Object) []reconcile.Request {
	var versions v1alpha1.ModelVersionList
	if err := r.List(ctx, &versions, client.InNamespace(o.GetNamespace()), client.MatchingFields{index.VersionLine: o.GetName()}); err != nil {
		log.FromContext(ctx).Error(err, "list ModelVersions of line", "line", client.ObjectKeyFromObject(o))
		return nil
	}
	var reqs []reconcile.Request
	for _, v := range versions.Items {
		if !metav1.IsControlledBy(&v, o) {
			reqs = append(reqs, reconcile.Request{NamespacedName: client.ObjectKeyFromObject(&v)})
		}
	}
	return reqs
}
