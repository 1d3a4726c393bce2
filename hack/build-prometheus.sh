#!/usr/bin/env bash
# Builds prometheus and promtool from the Go module proxy into bin/prom
# (git-ignored), for machines where Debian's package cannot be installed
# (no root, no apt). About 10 minutes on 2 cores, once. The HTTP API the
# controller and the tests use works; the web UI's assets are not built.
set -euo pipefail

root=$(cd "$(dirname "$0")/.." && pwd)
out="$root/bin/prom"
version=v0.316.0

mkdir -p "$out"
for c in prometheus promtool; do
  if [ -x "$out/$c" ]; then
    echo "build-prometheus: $c already built ($out/$c)"
    continue
  fi
  start=$(date +%s)
  echo "build-prometheus: building $c $version from the Go module proxy ..."
  GOBIN="$out/.tmp" go install "github.com/prometheus/prometheus/cmd/$c@$version"
  mv "$out/.tmp/$c" "$out/$c" && rmdir "$out/.tmp"
  echo "build-prometheus: $c built in $(( $(date +%s) - start ))s"
done
