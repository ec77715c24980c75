# limpid build, demo, test and benchmark entry points.
# `make demo` and `make test` install what is missing (Debian packages, Go
# modules, the pinned npm packages of testdata/node) themselves and are safe
# to run again.
SHELL := /bin/bash
GO ?= go
APT_PKGS := libgdal-dev gdal-bin python3-gdal python3-skimage pkg-config chromium
SUDO := $(shell [ "$$(id -u)" = 0 ] || echo sudo)
# The Node cross-check of the Arrow tile stream (npm apache-arrow, pinned).
NODE_DIR := testdata/node

.PHONY: deps demo test test-long bench build clean

# go test's -timeout is per package (per test binary). The default run takes
# about 1.5 minutes per package with -race on an idle 2-core machine
# (DEVELOPERS.md, "Testing"); 5 minutes leaves room for a loaded one and
# still stops a hung test long before go test's own 10-minute default.
TEST_TIMEOUT ?= 5m
# make test-long adds the measurement-grade cases (LIMPID_LONG=1) and keeps
# -race: some paths run only there (the automatic bandwidth through the
# particle CLI, worker byte identity with the automatic choice), and the
# whole run takes about 4 minutes on an idle 2-core machine (20 s without
# -race), far inside its timeout.
LONG_TIMEOUT ?= 60m

deps:
	@if ! dpkg -s $(APT_PKGS) >/dev/null 2>&1; then \
		echo "installing $(APT_PKGS)"; \
		$(SUDO) apt-get update -q && DEBIAN_FRONTEND=noninteractive $(SUDO) apt-get install -y -q $(APT_PKGS); \
	fi
	@command -v node >/dev/null 2>&1 && command -v npm >/dev/null 2>&1 || { \
		echo "installing nodejs npm"; \
		$(SUDO) apt-get update -q && DEBIAN_FRONTEND=noninteractive $(SUDO) apt-get install -y -q nodejs npm; \
	}
	@cd $(NODE_DIR) && npm ci --no-audit --no-fund --loglevel=error
	@$(GO) mod download

build: deps
	$(GO) build -o bin/limpid ./cmd/limpid

demo: build
	./bin/limpid demo --out limpid-demo

test: deps
	@test -z "$$(gofmt -l $$(git ls-files '*.go' 2>/dev/null || find . -name '*.go'))" || { echo "gofmt needed:"; gofmt -l .; exit 1; }
	$(GO) vet ./...
	CGO_ENABLED=0 $(GO) vet ./step/... ./psf/... ./arrowio/... ./raster
	$(GO) test -race -count=1 -timeout $(TEST_TIMEOUT) ./...
	$(GO) test -count=1 -timeout $(TEST_TIMEOUT) -run 'TestHelpExamplesRun|TestREADMEExamplesRun|TestREADMENumbers' ./cmd/limpid
	$(GO) test -run '^$$' -fuzz FuzzReader -fuzztime 10s -timeout 2m ./arrowio
	$(GO) test -run '^$$' -fuzz '^FuzzParse$$' -fuzztime 5s -timeout 2m ./psf
	$(GO) test -run '^$$' -fuzz '^FuzzReadTextMatrix$$' -fuzztime 5s -timeout 2m ./psf
	$(GO) test -run '^$$' -fuzz '^FuzzParseMeasured$$' -fuzztime 5s -timeout 2m ./psf
	$(GO) test -run '^$$' -fuzz '^FuzzParseNoise$$' -fuzztime 5s -timeout 2m ./step/simulate
	$(GO) test -run '^$$' -fuzz '^FuzzParseBands$$' -fuzztime 5s -timeout 2m ./cmd/limpid
	$(GO) test -run '^$$' -fuzz '^FuzzParseNoiseFlag$$' -fuzztime 5s -timeout 2m ./cmd/limpid

test-long: deps
	LIMPID_LONG=1 $(GO) test -race -count=1 -timeout $(LONG_TIMEOUT) ./...

bench: deps
	$(GO) test -run '^$$' -bench . -benchmem -benchtime 10x ./step
	LIMPID_BENCH_SCENE=1 $(GO) test -run '^$$' -bench 'BenchmarkScene' -benchtime 1x -timeout 60m ./cmd/limpid
	LIMPID_BENCH_STREAM=1 $(GO) test -run '^$$' -bench 'BenchmarkStreamRSS200' -benchtime 1x -cpu 1 ./cmd/limpid

clean:
	rm -rf bin limpid-demo
