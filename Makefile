# sluice — run `make help` for the targets.
GO        ?= go
BIN       ?= bin
GOBIN     ?= $(shell $(GO) env GOPATH)/bin
PKGS      ?= ./...
TESTFLAGS ?= -timeout 40m -count=1
export PATH := $(GOBIN):$(PATH)

.PHONY: help build demo test test-go setup bench fuzz lint proto proto-check clean

help: ## list the targets
	@awk 'BEGIN {FS = ":.*## "} /^[a-zA-Z_-]+:.*## / {printf "  \033[1m%-12s\033[0m %s\n", $$1, $$2}' $(MAKEFILE_LIST)

build: ## build the sluice binary into bin/
	$(GO) build -o $(BIN)/sluice ./services/sluice

demo: build ## run the demo campaign through the whole pipeline (embedded NATS, local store)
	$(BIN)/sluice demo

setup: ## install what the tests need (Debian packages, MinIO, nats-server, playwright-core); idempotent
	bash scripts/setup-test-env

test: setup proto-check ## set up, then run every test (the command CI runs)
	$(GO) vet $(PKGS)
	$(GO) test $(TESTFLAGS) $(PKGS)

test-go: ## run the Go tests only, without set-up
	$(GO) test $(TESTFLAGS) $(PKGS)

bench: build ## run the benchmarks (MVox/s and MB/s figures)
	$(GO) test -run '^$$' -bench . -benchtime 3x $(PKGS)
	$(BIN)/sluice bench

fuzz: ## fuzz every parser for 20 s each
	@for t in $$(grep -rhoE '^func Fuzz[A-Za-z0-9_]+' --include='*_test.go' pkg | sed 's/func //'); do \
		pkg=$$(grep -rlE "^func $$t\(" --include='*_test.go' pkg | head -1 | xargs dirname); \
		echo "== $$pkg $$t"; $(GO) test -run '^$$' -fuzz "^$$t$$" -fuzztime 20s ./$$pkg || exit 1; \
	done

lint: ## gofmt and go vet
	@test -z "$$(gofmt -l $$(git ls-files '*.go'))" || (gofmt -l $$(git ls-files '*.go'); echo "gofmt needed"; exit 1)
	$(GO) vet $(PKGS)

proto: ## regenerate the Protocol Buffers code in proto/
	bash proto/gen.sh

proto-check: ## fail when the generated protobuf code is stale
	bash proto/check.sh

clean: ## remove build output
	rm -rf $(BIN)
