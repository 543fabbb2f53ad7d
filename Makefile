# Developer and CI targets. `make test` is the test command README.md gives.
GO ?= go
PKGS := ./...

.PHONY: all build test test-short bench lint fmt generate check-generate validate demo

all: lint test

build:
	$(GO) build -o bin/ ./cmd/...

# The whole suite with the race detector. Datasets are found at ../shared/datasets
# (override with VOLTCAST_DATASETS); tests that need them skip with a message when absent.
test:
	$(GO) test -race -count=1 $(PKGS)

test-short:
	$(GO) test -short $(PKGS)

bench:
	$(GO) test -run '^$$' -bench . -benchmem -count=1 ./model/...

fmt:
	gofmt -w $$(git ls-files '*.go')

lint:
	@out=$$(gofmt -l $$(git ls-files '*.go')); if [ -n "$$out" ]; then echo "gofmt needed:"; echo "$$out"; exit 1; fi
	$(GO) vet $(PKGS)
	$(GO) tool staticcheck $(PKGS)

generate:
	@true

check-generate: generate
	@git diff --exit-code -- proto gateway || (echo "generated code is stale: run make generate"; exit 1)

validate:
	@true
