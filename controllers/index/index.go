// Package index names the field indexes the manager keeps, so a change to a
// Deployment or a ModelVersion finds its lines (and a line its versions)
// without listing them all. Both reconcilers use them; Register adds them
// to a manager once.
package index

import (
	"context"
	"fmt"

	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

const (
	// ServingDeployment indexes ModelLines by spec.serving.deploymentName.
	ServingDeployment = "spec.serving.deploymentName"
	// VersionLine indexes ModelVersions by spec.line.
	VersionLine = "spec.line"
	// HistoryLine indexes the metadata of history versions (those labelled
	// v1alpha1.HistoryLabel) by the ModelLine that controls them.
	HistoryLine = "metadata.controller.line"
)

// Register adds the indexes to the manager's cache.
func Register(ctx context.Context, mgr ctrl.Manager) error {
	if err := mgr.GetFieldIndexer().IndexField(ctx, &v1alpha1.ModelLine{}, ServingDeployment, func(o client.Object) []string {
		return []string{o.(*v1alpha1.ModelLine).Spec.Serving.DeploymentName}
	}); err != nil {
		return fmt.Errorf("index ModelLines by serving Deployment: %w", err)
	}
	if err := mgr.GetFieldIndexer().IndexField(ctx, &v1alpha1.ModelVersion{}, VersionLine, func(o client.Object) []string {
		return []string{o.(*v1alpha1.ModelVersion).Spec.Line}
	}); err != nil {
		return fmt.Errorf("index ModelVersions by line: %w", err)
	}
	return nil
}

// History is an empty metadata-only ModelVersion, the object type of the
// history cache.
func History() *metav1.PartialObjectMetadata {
	var o metav1.PartialObjectMetadata
	o.SetGroupVersionKind(v1alpha1.GroupVersion.WithKind("ModelVersion"))
	return &o
}

// HistoryList is an empty list of metadata-only ModelVersions.
func HistoryList() *metav1.PartialObjectMetadataList {
	var l metav1.PartialObjectMetadataList
	l.SetGroupVersionKind(v1alpha1.GroupVersion.WithKind("ModelVersionList"))
	return &l
}

// RegisterHistory adds the index of history versions by line to the
// history cache.
func RegisterHistory(ctx context.Context, c client.FieldIndexer) error {
	if err := c.IndexField(ctx, History(), HistoryLine, ControllingLine); err != nil {
		return fmt.Errorf("index history ModelVersions by line: %w", err)
	}
	return nil
}

// ControllingLine is the index function of HistoryLine: the name of the
// ModelLine that controls the object, if one does.
func ControllingLine(o client.Object) []string {
	ref := metav1.GetControllerOfNoCopy(o)
	if ref == nil || ref.Kind != "ModelLine" || ref.APIVersion != v1alpha1.GroupVersion.String() {
		return nil
	}
	return []string{ref.Name}
}

// LineOfVersion is the index function of VersionLine, for clients built
// without a manager (tests).
func LineOfVersion(o client.Object) []string { return []string{o.(*v1alpha1.ModelVersion).Spec.Line} }
