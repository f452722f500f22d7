#!/usr/bin/env bash
# Fails when the committed code in proto/sluicepb differs from what
# proto/gen.sh generates from proto/sluice/v1/*.proto. The line naming the
# protoc version is ignored, so a different Debian protoc does not count as
# stale; everything else must match byte for byte.
set -euo pipefail
repo="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
"$repo/proto/gen.sh" "$tmp"
strip() { sed -e '/^\/\/ \tprotoc  *v/d' -e '/^\/\/ \tprotoc  *(unknown)/d' "$1"; }
stale=0
for f in "$tmp"/proto/sluicepb/*.pb.go; do
	name="$(basename "$f")"
	committed="$repo/proto/sluicepb/$name"
	if [ ! -f "$committed" ]; then
		echo "proto/check.sh: proto/sluicepb/$name is missing; run make proto" >&2
		stale=1
	elif ! diff -u <(strip "$committed") <(strip "$f") >"$tmp/diff"; then
		echo "proto/check.sh: proto/sluicepb/$name is stale; run make proto" >&2
		head -40 "$tmp/diff" >&2
		stale=1
	fi
done
for f in "$repo"/proto/sluicepb/*.pb.go; do
	[ -f "$tmp/proto/sluicepb/$(basename "$f")" ] || { echo "proto/check.sh: proto/sluicepb/$(basename "$f") has no .proto source" >&2; stale=1; }
done
if [ "$stale" = 0 ]; then echo "proto/check.sh: generated code is up to date"; fi
exit "$stale"
