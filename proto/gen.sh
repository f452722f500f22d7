#!/usr/bin/env bash
# Regenerates the Go code of proto/sluice/v1/*.proto into proto/sluicepb.
# Usage: proto/gen.sh [output-root]   (default: the repository root)
# Needs protoc (Debian: apt-get install -y protobuf-compiler). The Go plugin is
# built from the google.golang.org/protobuf version that go.mod requires, so the
# generated code always matches the runtime library.
set -euo pipefail
repo="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
out="${1:-$repo}"
if ! command -v protoc >/dev/null 2>&1; then
	echo "proto/gen.sh: protoc not found; install it with: apt-get install -y protobuf-compiler" >&2
	exit 1
fi
bin="$(mktemp -d)"
trap 'rm -rf "$bin"' EXIT
(cd "$repo" && go build -o "$bin/protoc-gen-go" google.golang.org/protobuf/cmd/protoc-gen-go)
mkdir -p "$out"
cd "$repo"
PATH="$bin:$PATH" protoc -I proto --go_out="$out" --go_opt=module=sluice proto/sluice/v1/*.proto
