// Package index names the field indexes the manager keeps, so a change to a
// Deployment or a ModelVersion finds its lines (and a line its versions)
// without listing them all. Both reconcilers use them; Register adds them
// to a manager once.
package index

import (
	"context"
	"fmt"

	ctrl "sigs.k8s.io/controller-runtime"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/api/v1alpha1"
)

const (
	// ServingDeployment indexes ModelLines by spec.serving.deploymentName.
	ServingDeployment = "spec.serving.deploymentName"
	// VersionLine indexes ModelVersions by spec.line.
	VersionLine = "spec.line"
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

// LineOfVersion is the index function of VersionLine, for clients built
// without a manager (tests).
func LineOfVersion(o client.Object) []string { return []string{o.(*v1alpha1.ModelVersion).Spec.Line} }
