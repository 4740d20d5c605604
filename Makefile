# fringeflow: the two commands of the README, and their helpers.
# `make demo` and `make test` install what they need on a fresh Debian 12
# machine (as root): libhdf5-dev with apt-get, numpy/scipy/h5py with pip.

CARGO  ?= cargo
PYTHON ?= python3
BIN    := target/release/fringeflow

.PHONY: demo test deps-system deps-python build sample-data bench clean

deps-system:
	@if ! dpkg -s libhdf5-dev >/dev/null 2>&1 || ! command -v pkg-config >/dev/null 2>&1; then \
	  echo "== installing libhdf5-dev and pkg-config (apt-get)"; \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq libhdf5-dev pkg-config >/dev/null; \
	fi

deps-python:
	@if ! $(PYTHON) -c "import numpy, scipy, h5py" >/dev/null 2>&1; then \
	  echo "== installing numpy, scipy, h5py (pip)"; \
	  $(PYTHON) -m pip install -q numpy scipy h5py; \
	fi

build: deps-system
	$(CARGO) build --release --locked

demo: build
	$(BIN) inspect sample-data/layered-phantom.h5
	$(BIN) run sample-data/layered-phantom.h5 --pipeline pipelines/default.toml --out out/demo
	@echo "images: out/demo/layered-phantom/frame-*.png; volume: out/demo/layered-phantom/volume.h5; log: out/demo/layered-phantom/log.json"

test: deps-system deps-python
	$(CARGO) test --locked -- --test-threads=2

# Rewrite the sample capture from its scene (deterministic: same bytes).
sample-data: build
	$(BIN) simulate sample-data/layered-phantom.toml --out sample-data/layered-phantom.h5

bench: deps-system
	$(CARGO) bench --locked

clean:
	$(CARGO) clean
	rm -rf out
