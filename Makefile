# sluice — run `make help` for the targets.
GO        ?= go
BIN       ?= bin
GOBIN     ?= $(shell $(GO) env GOPATH)/bin
PKGS      ?= ./...
TESTFLAGS ?= -timeout 40m -count=1
# Vector instructions (simd/archsimd in pkg/filter, used on AVX2 CPUs): every
# build and test here has the experiment on; `make GOEXPERIMENT= build` gives
# the scalar code, with the same results.
GOEXPERIMENT ?= simd
export GOEXPERIMENT
export PATH := $(GOBIN):$(PATH)
# HDF5 input needs cgo and the HDF5 C library: built in when pkg-config finds
# it (Debian libhdf5-dev). Expanded when a recipe runs, so after `make setup`.
GOTAGS     = $(shell pkg-config --exists hdf5 2>/dev/null && echo hdf5)

.PHONY: help build demo test test-go test-nocgo test-scalar test-race setup bench fuzz fuzz-ci lint proto proto-check clean

help: ## list the targets
	@awk 'BEGIN {FS = ":.*## "} /^[a-zA-Z_-]+:.*## / {printf "  \033[1m%-12s\033[0m %s\n", $$1, $$2}' $(MAKEFILE_LIST)

build: ## build the sluice binary into bin/
	$(GO) build -tags '$(GOTAGS)' -o $(BIN)/sluice ./services/sluice

demo: build ## run the demo campaign through the whole pipeline (embedded NATS, local store)
	$(BIN)/sluice demo

setup: ## install what the tests need (Debian packages, MinIO, nats-server, playwright-core); idempotent
	bash scripts/setup-test-env

test: setup proto-check ## set up, then run every test, the concurrent packages under -race, and a short fuzz of every parser (the command CI runs)
	$(GO) vet -tags '$(GOTAGS)' $(PKGS)
	$(GO) test -tags '$(GOTAGS)' $(TESTFLAGS) $(PKGS)
	$(MAKE) test-nocgo
	$(MAKE) test-race
	$(MAKE) test-scalar
	$(MAKE) fuzz-ci

test-scalar: ## run pkg/filter's tests built without GOEXPERIMENT=simd (the scalar paths)
	GOEXPERIMENT= $(GO) test $(TESTFLAGS) ./pkg/filter/

test-go: ## run the Go tests only, without set-up
	$(GO) test -tags '$(GOTAGS)' $(TESTFLAGS) $(PKGS)

test-nocgo: ## build sluice and test pkg/volio without cgo (no HDF5: the one-line refusal)
	CGO_ENABLED=0 $(GO) build -o /dev/null ./services/sluice
	CGO_ENABLED=0 $(GO) test -count=1 ./pkg/volio/

# Packages whose code runs goroutines against shared state (queue, store,
# services, pipeline). -short leaves out the longest campaign tests; the
# pipeline, restart and fault paths they share still run under the detector.
RACE_PKGS ?= ./pkg/queue/... ./pkg/store/... ./pkg/web/... ./pkg/scan/... ./services/...
RACEFLAGS ?= -race -short -timeout 30m -count=1

test-race: ## run the packages with concurrency under the race detector
	$(GO) test -tags '$(GOTAGS)' $(RACEFLAGS) $(RACE_PKGS)

bench: build ## run the benchmarks (MVox/s and MB/s figures)
	$(GO) test -tags '$(GOTAGS)' -run '^$$' -bench . -benchtime 3x $(PKGS)
	$(BIN)/sluice bench

# Every fuzz target of the repository, as "dir:FuzzName" pairs (seeds come
# from each package's testdata/ and from testdata/bad; crashers found are
# written to <dir>/testdata/fuzz/<FuzzName>/ and must be committed with a fix).
FUZZ_TARGETS = $(shell for d in $$(grep -rlE '^func Fuzz[A-Za-z0-9_]+' --include='*_test.go' pkg services | xargs -n1 dirname | sort -u); do \
	for t in $$(grep -hoE '^func Fuzz[A-Za-z0-9_]+' $$d/*_test.go | sed 's/func //'); do echo $$d:$$t; done; done)
FUZZTIME    ?= 60s
FUZZCI_TIME ?= 3s

fuzz: ## fuzz every parser for FUZZTIME (60 s) each
	@for x in $(FUZZ_TARGETS); do d=$${x%%:*}; t=$${x##*:}; \
		echo "== $$d $$t"; $(GO) test -tags '$(GOTAGS)' -run '^$$' -fuzz "^$$t$$" -fuzztime $(FUZZTIME) ./$$d || exit 1; \
	done

fuzz-ci: ## fuzz every parser briefly (FUZZCI_TIME each; part of `make test`)
	@tmp=$$(mktemp -d); n=0; \
	for d in $$(echo "$(FUZZ_TARGETS)" | tr ' ' '\n' | cut -d: -f1 | sort -u); do \
		$(GO) test -tags '$(GOTAGS)' -c -fuzz . -o $$tmp/fuzz.test ./$$d || { rm -rf $$tmp; exit 1; }; \
		for t in $$(echo "$(FUZZ_TARGETS)" | tr ' ' '\n' | grep "^$$d:" | cut -d: -f2); do n=$$((n+1)); \
			( cd $$d && $$tmp/fuzz.test -test.run '^$$' -test.fuzz "^$$t$$" -test.fuzztime $(FUZZCI_TIME) -test.parallel 2 \
				-test.fuzzcachedir $$tmp/cache/$$d > $$tmp/log 2>&1 ) || { cat $$tmp/log; rm -rf $$tmp; exit 1; }; \
			echo "fuzz $$d $$t: $$(grep -o 'execs: [0-9]*' $$tmp/log | tail -1) in $(FUZZCI_TIME)"; \
		done; \
	done; rm -rf $$tmp; echo "fuzz-ci: $$n targets, no failures"

lint: ## gofmt and go vet
	@test -z "$$(gofmt -l $$(git ls-files '*.go'))" || (gofmt -l $$(git ls-files '*.go'); echo "gofmt needed"; exit 1)
	$(GO) vet $(PKGS)

proto: ## regenerate the Protocol Buffers code in proto/
	bash proto/gen.sh

proto-check: ## fail when the generated protobuf code is stale
	bash proto/check.sh

clean: ## remove build output
	rm -rf $(BIN)
