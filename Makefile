# weft's build, test and demo targets. `make demo` and `make test` are the two
# set-up commands of the README: each installs what it needs (Go modules; the
# real test corpora into .cache/corpora, ONNX Runtime for Node.js into
# .cache/onnxruntime; Debian's chromium for the report's browser test, when
# run as root) or says exactly what is missing.

GO        ?= go
BIN       := bin/weft
VERSION   ?= $(shell git describe --tags --always --dirty 2>/dev/null || echo dev)
LDFLAGS   := -X main.version=$(VERSION)
# Packages that run goroutines of their own: tested again under the race detector.
RACE_PKGS := ./rnn/linalg/... ./checkpoint/... ./cmd/...
FUZZTIME  ?= 10s

SIZES     ?= 40MB 400MB
MEMCHECK_SIZES ?= 100MB,400MB

.PHONY: all build test memory-check memory-table demo bench bench-peer fuzz lint docs references corpora onnxruntime slurm chromium onnx-proto onnx-references clean check-go

all: build

check-go:
	@command -v $(GO) >/dev/null 2>&1 || { echo "make: Go is not installed (weft needs Go 1.26 or newer: https://go.dev/dl)" >&2; exit 1; }

build: check-go
	$(GO) build -ldflags "$(LDFLAGS)" -o $(BIN) ./cmd/weft

corpora:
	@./testdata/fetch-corpora.sh

# ONNX Runtime (npm's onnxruntime-node) runs the exported models in the tests
# of checkpoint/onnx and cmd/weft.
onnxruntime:
	@./testdata/fetch-onnxruntime.sh

# Debian's Slurm and munge for the single-node Slurm test of cmd/weft
# (installed when root; otherwise the script says what is missing).
slurm:
	@./testdata/sweep/install-slurm.sh

# Debian's chromium loads the morning report headless in the tests of
# checkpoint/runs/report.
chromium:
	@./testdata/fetch-chromium.sh

test: check-go corpora onnxruntime slurm chromium
	$(GO) mod download
	$(GO) vet ./...
	$(GO) test -count=1 ./...
	$(GO) test -count=1 -race -short $(RACE_PKGS)

# The bounded-memory check of issue 18 at hundreds of megabytes, outside
# `make test` (minutes, and 3 bytes of temporary disk per corpus byte):
# prepare, train, baselines and eval of bin/weft on two generated corpora,
# each verb's peak memory under a fixed bound that does not grow with the
# corpus (cmd/weft/memory_test.go says what the bound covers).
# MEMCHECK_SIZES: the two sizes, smaller first (default 100MB,400MB).
memory-check: build
	WEFT_MEMCHECK=1 WEFT_MEMCHECK_SIZES="$(MEMCHECK_SIZES)" WEFT_MEMCHECK_BIN="$(CURDIR)/$(BIN)" \
		$(GO) test -count=1 -timeout 0 -run '^TestMemoryBound$$' -v ./cmd/weft

# Issue 18's table of peak memory and time per verb, at SIZES (default
# 40MB 400MB; e.g. make memory-table SIZES="40MB 400MB 4GB").
memory-table: build
	WEFT=$(BIN) ./testdata/memory-table.sh $(SIZES)

demo: build
	./$(BIN) demo

bench: check-go corpora
	$(GO) test -run '^$$' -bench . -benchmem -benchtime 3x ./...

# THREADS: the thread counts to sweep, e.g. make bench-peer THREADS="1 2 4 8 16"
# (default 1 2 up to 2 cores, else 1 2 4 ... up to the core count).
bench-peer: build
	THREADS="$(THREADS)" ./testdata/bench-peer.sh

fuzz: check-go
	@set -e; for pkg in $$($(GO) list ./...); do \
		for f in $$($(GO) test -list '^Fuzz' $$pkg | grep '^Fuzz' || true); do \
			echo "fuzz $$pkg $$f ($(FUZZTIME))"; \
			$(GO) test -run '^$$' -fuzz "^$$f$$" -fuzztime $(FUZZTIME) $$pkg; \
		done; \
	done

lint: check-go
	@out=$$(gofmt -l $$(git ls-files '*.go')); if [ -n "$$out" ]; then echo "gofmt needed:"; echo "$$out"; exit 1; fi
	$(GO) vet ./...

docs: check-go
	$(GO) run ./configs/keydoc -w README.md

references: onnx-references
	./testdata/references.sh

# The Go types of the ONNX format, from the schema in Debian's python3-onnx.
onnx-proto: check-go
	./checkpoint/onnx/onnxpb/generate.sh

# The fixture models of checkpoint/onnx and the ONNX checker's verdict on them.
onnx-references: check-go
	./checkpoint/onnx/testdata/references.sh

clean:
	rm -rf bin .cache
