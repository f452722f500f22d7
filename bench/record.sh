#!/usr/bin/env bash
# record.sh — records the Go benchmark baseline of sluice's packages.
#
#   bench/record.sh [OUT] [REV]
#
# OUT defaults to bench/new.txt, REV to HEAD. The benchmarks run on a clean
# export of REV (git archive into a temporary directory), so edits in the
# working tree do not leak into the figures. Environment:
#   COUNT      samples per benchmark for benchstat (default 6)
#   BENCHTIME  go test -benchtime (default 1s, the go test default)
#   PKGS       packages (default ./pkg/...)
#   BENCH      -bench regexp (default .)
#   CPUS       -cpu list (default: GOMAXPROCS of the machine)
#
# Compare two records with benchstat (pinned; needs the Go module proxy,
# not part of go.mod):
#   go run golang.org/x/perf/cmd/benchstat@v0.0.0-20260908200009-22c9c6c9d4da bench/baseline.txt bench/new.txt
set -euo pipefail

repo=$(git -C "$(dirname "$0")/.." rev-parse --show-toplevel)
out=${1:-$repo/bench/new.txt}
rev=${2:-HEAD}
count=${COUNT:-6}
benchtime=${BENCHTIME:-1s}
pkgs=${PKGS:-./pkg/...}
bench=${BENCH:-.}

case $out in /*) ;; *) out=$PWD/$out ;; esac
commit=$(git -C "$repo" rev-parse --verify "$rev^{commit}")
tmp=$(mktemp -d "${TMPDIR:-/tmp}/sluice-bench-XXXXXX")
trap 'rm -rf "$tmp"' EXIT
git -C "$repo" archive "$commit" | tar -x -C "$tmp"

cpuflag=()
if [ -n "${CPUS:-}" ]; then cpuflag=(-cpu "$CPUS"); fi

{
	# Notes start with '#': benchstat would read "key: value" lines as
	# configuration and split the comparison by them.
	echo "# commit $commit"
	echo "# recorded $(date -u +%Y-%m-%dT%H:%M:%SZ) on $(nproc) CPUs, $(go env GOVERSION)"
	echo "# load average at start $(cut -d' ' -f1-3 /proc/loadavg)"
	echo "# go test -run '^\$' -bench '$bench' -benchtime $benchtime -count $count -benchmem ${cpuflag[*]} $pkgs"
	# A package that fails to build or whose benchmark fails is reported
	# (FAIL lines stay in the record) without losing the other packages.
	status=0
	(cd "$tmp" && go test -run '^$' -bench "$bench" -benchtime "$benchtime" -count "$count" \
		-benchmem -timeout 90m "${cpuflag[@]}" $pkgs) || status=$?
	echo "# load average at end $(cut -d' ' -f1-3 /proc/loadavg)"
	echo "# go test exit status $status"
} >"$out.tmp" 2>&1
mv "$out.tmp" "$out"
if grep -q '^\(FAIL\|--- FAIL\)' "$out"; then
	echo "wrote $out ($commit); some packages FAILED, see the FAIL lines" >&2
	exit 1
fi
echo "wrote $out ($commit)" >&2
