//go:build tools

// Package controlplane pins the Kubernetes control-plane commands that the
// project's tests and demo build from source (see hack/build-controlplane.sh).
package controlplane

import (
	_ "k8s.io/kubernetes/cmd/kube-apiserver"
	_ "k8s.io/kubernetes/cmd/kube-controller-manager"
	_ "k8s.io/kubernetes/cmd/kube-proxy"
	_ "k8s.io/kubernetes/cmd/kube-scheduler"
	_ "k8s.io/kubernetes/cmd/kubectl"
	_ "k8s.io/kubernetes/cmd/kubelet"
)
