# limpid build, demo, test and benchmark entry points.
# Each target installs what it needs and is missing (Debian packages with
# --no-install-recommends, Go modules, the pinned npm packages of
# testdata/node) and is safe to run again:
#   make build / make demo   gcc libgdal-dev pkg-config (the cgo build), Go modules
#   make test / test-long    + gdal-bin python3-gdal python3-skimage chromium
#                            slurm-wlm munge parallel (the tests' cross-checks
#                            and engines), nodejs npm when `node` is absent,
#                            npm ci in testdata/node
#   make deps-ref            python3-skimage, only to regenerate the committed
#                            reference vectors (testdata/ref/*.py)
#   make bench               the build's packages (go run ./scripts/bench)
#   make sidebyside          + python3-skimage python3-gdal (already among
#                            make test's packages)
SHELL := /bin/bash
GO ?= go
# The cgo build of raster/gdal. gcc is named: without recommends nothing
# else brings a C compiler (libc6-dev only recommends one).
BUILD_PKGS := gcc libgdal-dev pkg-config
# What the tests run: gdalinfo and gdal_translate (gdal-bin), the COG
# validator under /usr/bin/python3 (python3-gdal), scikit-image for the
# side-by-side assess check (python3-skimage), the headless browser of the
# HTML report test (chromium; no driver is used), and the scale-out test's
# single-node Slurm and GNU parallel (slurm-wlm munge parallel; the test
# starts and stops its own daemons).
TEST_PKGS := gdal-bin python3-gdal python3-skimage chromium slurm-wlm munge parallel
# The generators of testdata/ref run scikit-image (and scipy, numpy).
REF_PKGS := python3-skimage
SUDO := $(shell [ "$$(id -u)" = 0 ] || echo sudo)
APT_INSTALL := DEBIAN_FRONTEND=noninteractive $(SUDO) apt-get install -y -q --no-install-recommends
# The Node cross-check of the Arrow tile stream (npm apache-arrow, pinned).
NODE_DIR := testdata/node

# apt_missing installs the Debian packages of $(1) that are not installed.
define apt_missing
	@missing="$$(for p in $(1); do dpkg -s $$p >/dev/null 2>&1 || echo $$p; done)"; \
	if [ -n "$$missing" ]; then \
		echo "installing" $$missing; \
		$(SUDO) apt-get update -q && $(APT_INSTALL) $$missing; \
	fi
endef

.PHONY: deps deps-build deps-test deps-ref demo test test-long bench sidebyside build clean

# go test's -timeout is per package (per test binary). The slowest packages
# (step, cmd/limpid) take about 2-4 minutes each with -race on a 2-core
# machine (DEVELOPERS.md, "Testing"); 8 minutes leaves room for a loaded one
# and still stops a hung test.
TEST_TIMEOUT ?= 8m
# make test-long adds the measurement-grade cases (LIMPID_LONG=1) and keeps
# -race: some paths run only there (the automatic bandwidth through the
# particle CLI, worker byte identity with the automatic choice), and the
# whole run takes about 4 minutes on an idle 2-core machine (20 s without
# -race), far inside its timeout.
LONG_TIMEOUT ?= 60m

deps-build:
	$(call apt_missing,$(BUILD_PKGS))
	@$(GO) mod download

# nodejs/npm come from apt only when no `node` and `npm` are on PATH (a
# NodeSource or nvm install is kept).
deps-test: deps-build
	$(call apt_missing,$(TEST_PKGS))
	@command -v node >/dev/null 2>&1 && command -v npm >/dev/null 2>&1 || { \
		echo "installing nodejs npm"; \
		$(SUDO) apt-get update -q && $(APT_INSTALL) nodejs npm; \
	}
	@cd $(NODE_DIR) && npm ci --no-audit --no-fund --loglevel=error

deps-ref:
	$(call apt_missing,$(REF_PKGS))

# deps: everything the tests need (kept for existing scripts).
deps: deps-test

build: deps-build
	$(GO) build -o bin/limpid ./cmd/limpid

demo: build
	./bin/limpid demo --out limpid-demo

test: deps-test
	@test -z "$$(gofmt -l $$(git ls-files '*.go' 2>/dev/null || find . -name '*.go'))" || { echo "gofmt needed:"; gofmt -l .; exit 1; }
	$(GO) vet ./...
	CGO_ENABLED=0 $(GO) vet ./step/... ./psf/... ./arrowio/... ./raster
	$(GO) test -race -count=1 -timeout $(TEST_TIMEOUT) ./...
	$(GO) test -count=1 -timeout $(TEST_TIMEOUT) -run 'TestHelpExamplesRun|TestREADMEExamplesRun|TestREADMENumbers|TestScaleOutEngines' ./cmd/limpid
	$(GO) test -run '^$$' -fuzz FuzzReader -fuzztime 10s -timeout 2m ./arrowio
	$(GO) test -run '^$$' -fuzz '^FuzzParse$$' -fuzztime 5s -timeout 2m ./psf
	$(GO) test -run '^$$' -fuzz '^FuzzReadTextMatrix$$' -fuzztime 5s -timeout 2m ./psf
	$(GO) test -run '^$$' -fuzz '^FuzzParseMeasured$$' -fuzztime 5s -timeout 2m ./psf
	$(GO) test -run '^$$' -fuzz '^FuzzParseNoise$$' -fuzztime 5s -timeout 2m ./step/simulate
	$(GO) test -run '^$$' -fuzz '^FuzzParseBands$$' -fuzztime 5s -timeout 2m ./cmd/limpid
	$(GO) test -run '^$$' -fuzz '^FuzzParseNoiseFlag$$' -fuzztime 5s -timeout 2m ./cmd/limpid

test-long: deps-test
	LIMPID_LONG=1 $(GO) test -race -count=1 -timeout $(LONG_TIMEOUT) ./...

# make bench prints one table (DEVELOPERS.md, "Benchmarks"): kernel
# throughput per core, the default/fixed cost at 2048^2 and 4096^2, peak
# RSS; about 10 minutes on a quiet 2-core machine.
# BENCH_FLAGS=-sizes=2048 skips the 4096^2 scene; SIDEBYSIDE=1 also runs
# the side-by-side against scikit-image (make sidebyside).
BENCH_FLAGS ?=
SIDEBYSIDE_FLAGS ?=
bench: deps-build
	$(GO) run ./scripts/bench $(BENCH_FLAGS)
	@if [ -n "$(SIDEBYSIDE)" ]; then $(MAKE) --no-print-directory sidebyside; fi

# The side-by-side of issue 13: limpid against scikit-image's
# Richardson-Lucy on one 2048^2 band, ratios and targets (scripts/sidebyside).
sidebyside: deps-build
	$(call apt_missing,python3-skimage python3-gdal)
	$(GO) run ./scripts/sidebyside $(SIDEBYSIDE_FLAGS)

clean:
	rm -rf bin limpid-demo
