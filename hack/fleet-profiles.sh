#!/usr/bin/env bash
# Prints the tops of the profiles `make bench-fleet` wrote: where the
# manager's and the API server's CPU went, and what the manager allocated
# during the stretch at rest (the heap profile after it, less the one before).
set -euo pipefail
dir=${1:?usage: hack/fleet-profiles.sh DIR}
top() { go tool pprof -top -nodecount=25 "$@" 2>/dev/null | sed -n '1,32p'; }
for f in "$dir"/*.pprof; do
	case $f in
	*manager-heap-*) continue ;;
	esac
	echo "== CPU: $f"
	top "$f"
done
if [ -f "$dir/manager-heap-after-rest.pprof" ]; then
	echo "== allocated during the stretch at rest (real clock)"
	top -sample_index=alloc_space -diff_base "$dir/manager-heap-before-rest.pprof" "$dir/manager-heap-after-rest.pprof"
	echo "== live heap after it"
	top -sample_index=inuse_space "$dir/manager-heap-after-rest.pprof"
fi
