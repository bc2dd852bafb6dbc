# lakescale: make build | test | demo | bench | bench-micro | lint | test-race | tidy-check | update-golden
GO       ?= go
VERSION  ?= $(shell git describe --tags --always --dirty 2>/dev/null || echo devel)
LDFLAGS  := -X main.version=$(VERSION)
BIN      := bin/lakescale
DEMO_DIR ?= demo-out
GOLANGCI := github.com/golangci/golangci-lint/v2/cmd/golangci-lint@v2.15.0

.PHONY: build test test-race demo bench bench-micro lint tidy-check update-golden clean

build:
	$(GO) build -trimpath -ldflags "$(LDFLAGS)" -o $(BIN) ./cmd/lakescale

# The README's test command: every unit, end-to-end and reference test.
test:
	$(GO) vet ./...
	$(GO) test -count=1 ./...

test-race:
	$(GO) test -count=1 -race -tags invariants ./...

# Writes an invented wind-turbine telemetry lake under $(DEMO_DIR)/lake and
# scales it into $(DEMO_DIR)/scaled.
demo: build
	./$(BIN) demo $(DEMO_DIR)
	./$(BIN) verify $(DEMO_DIR)/scaled

# Benchmarks are never part of `make test`. `make bench` generates the
# benchmark lake once under .bench-cache/ (BENCH_ROWS rows, default 20 M)
# and times the read and write floors, pass one, pass two, a full run and
# DuckDB doing the same two passes (bench/peer, its own module: the main
# module never depends on cgo or DuckDB), at 1 and 2 threads. Settings:
# BENCH_ROWS, BENCH_REPS (3), BENCH_THREADS (1,2), BENCH_JOBS, BENCH_CACHE.
bench:
	@mkdir -p bin/bench
	$(GO) build -trimpath -ldflags "$(LDFLAGS)" -o bin/bench/lakescale ./cmd/lakescale
	$(GO) build -o bin/bench/lakegen ./bench/lakegen
	$(GO) build -o bin/bench/floors ./bench/floors
	$(GO) build -o bin/bench/run ./bench/run
	cd bench/peer && $(GO) build -o ../../bin/bench/peer .
	./bin/bench/run

# The Go micro-benchmarks of the statistics and I/O packages.
bench-micro:
	$(GO) test -run '^$$' -bench . -benchmem ./stats/ ./arrowio/

lint:
	@test -z "$$(gofmt -l .)" || (echo "gofmt needed:"; gofmt -l .; exit 1)
	$(GO) vet ./...
	$(GO) run $(GOLANGCI) run ./...

tidy-check:
	$(GO) mod tidy
	git diff --exit-code go.mod go.sum

update-golden:
	$(GO) test ./... -update

clean:
	rm -rf bin $(DEMO_DIR)
