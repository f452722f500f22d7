#!/usr/bin/env bash
# Regenerates the bad-input corpus in this directory (deterministic).
set -euo pipefail
cd "$(dirname "$0")"
find . -mindepth 1 ! -name make.sh ! -name gen.go ! -name README.md -exec rm -rf {} +
go run gen.go
