# lakescale: make build | test | demo | bench | lint | test-race | tidy-check | update-golden
GO       ?= go
VERSION  ?= $(shell git describe --tags --always --dirty 2>/dev/null || echo devel)
LDFLAGS  := -X main.version=$(VERSION)
BIN      := bin/lakescale
DEMO_DIR ?= demo-out
GOLANGCI := github.com/golangci/golangci-lint/v2/cmd/golangci-lint@v2.15.0

.PHONY: build test test-race demo bench lint tidy-check update-golden clean

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

# Benchmarks are never part of `make test`.
bench:
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
