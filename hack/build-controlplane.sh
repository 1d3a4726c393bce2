#!/usr/bin/env bash
# Builds the Kubernetes control-plane binaries the tests and the demo run on,
# from the Go module proxy, into bin/k8s (git-ignored). A binary that is
# already there is kept, so only the first run on a machine pays the build
# (kube-apiserver: about 10 minutes on 2 cores).
#
# Usage: hack/build-controlplane.sh [component...]
#   components: etcd kube-apiserver kube-controller-manager kube-scheduler kwok kubectl kubelet kube-proxy
#   default:    etcd kube-apiserver (what the API-server test tier needs)
set -euo pipefail

root=$(cd "$(dirname "$0")/.." && pwd)
out="${PLUMBLINE_K8S_BIN:-$root/bin/k8s}"
mod="$root/hack/controlplane"
kwok_version=v0.8.0

mkdir -p "$out"
components=("$@")
[ ${#components[@]} -gt 0 ] || components=(etcd kube-apiserver)

for c in "${components[@]}"; do
  if [ -x "$out/$c" ]; then
    echo "build-controlplane: $c already built ($out/$c)"
    continue
  fi
  start=$(date +%s)
  echo "build-controlplane: building $c ..."
  case "$c" in
    etcd)
      (cd "$mod" && go build -trimpath -o "$out/$c.tmp" ./cmd/etcd) ;;
    kube-apiserver|kube-controller-manager|kube-scheduler)
      (cd "$mod" && go build -trimpath -o "$out/$c.tmp" "k8s.io/kubernetes/cmd/$c") ;;
    kubectl|kubelet|kube-proxy)
      # kubectl for the machines that have none (the tests render
      # config/default with its kustomize and read kubectl get's columns);
      # the kubelet and kube-proxy for the real node.
      v=$(cd "$mod" && go list -m -f '{{.Version}}' k8s.io/kubernetes)
      minor=$(echo "$v" | cut -d. -f2)
      (cd "$mod" && go build -trimpath -ldflags "-X k8s.io/component-base/version.gitVersion=$v -X k8s.io/component-base/version.gitMajor=1 -X k8s.io/component-base/version.gitMinor=$minor" \
        -o "$out/$c.tmp" "k8s.io/kubernetes/cmd/$c") ;;
    kwok)
      GOBIN="$out/.kwok" go install "sigs.k8s.io/kwok/cmd/kwok@$kwok_version"
      mv "$out/.kwok/kwok" "$out/$c.tmp" && rmdir "$out/.kwok" ;;
    *)
      echo "build-controlplane: unknown component $c (want etcd, kube-apiserver, kube-controller-manager, kube-scheduler, kwok, kubectl, kubelet or kube-proxy)" >&2
      exit 2 ;;
  esac
  # Rename only after a whole build, so an interrupted build is not mistaken
  # for a finished one on the next run.
  mv "$out/$c.tmp" "$out/$c"
  echo "build-controlplane: $c built in $(( $(date +%s) - start ))s"
done
