# Developer and CI targets. `make test` is the test command README.md gives.
GO ?= go
PKGS := ./...
# buf, pinned in tools/package.json + package-lock.json and installed by `make tools`
# into tools/node_modules (gitignored).
BUF := tools/node_modules/.bin/buf

.PHONY: all build test test-short bench lint fmt generate check-generate validate demo tools

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

lint: $(BUF)
	@out=$$(gofmt -l $$(git ls-files '*.go')); if [ -n "$$out" ]; then echo "gofmt needed:"; echo "$$out"; exit 1; fi
	$(GO) vet $(PKGS)
	$(GO) tool staticcheck $(PKGS)
	$(BUF) lint
	$(BUF) format -d --exit-code
	BUF=$(BUF) tools/buf-breaking.sh

# Pinned tools that do not come from go.mod's tool directives (buf, from npm; see BUF).
tools: $(BUF)

$(BUF): tools/package.json tools/package-lock.json
	cd tools && npm ci --no-audit --no-fund --loglevel=error
	@touch $@

# Regenerates the protobuf Go code, the gateway and the OpenAPI document from proto/
# (buf.gen.yaml). Works offline once `make tools` and `go mod download` have run.
generate: $(BUF)
	$(BUF) generate
	$(GO) run ./gateway/internal/openapifix gateway/openapi/voltcast.swagger.json

# Fails when the committed generated files differ from what `make generate` writes.
GENERATED := proto gateway/openapi
check-generate: generate
	@if [ -n "$$(git status --porcelain -- $(GENERATED))" ]; then \
		git status --short -- $(GENERATED); git diff --stat -- $(GENERATED); \
		echo "generated code is stale or uncommitted: run make generate and commit"; exit 1; fi

# Regenerates docs/validation.md: fits each measured cell of ../shared/datasets from its own
# OCV and pulse tests and reports voltage, SOC, runtime and health accuracy (a few seconds).
validate:
	$(GO) run ./cmd/voltcast validate --out docs/validation.md
