# fringeflow: the two commands of the README, and their helpers.
# `make demo` and `make test` install what they need on a fresh Debian 12
# machine (as root): libhdf5-dev (and fontconfig + a font for plots) with
# apt-get, slurm-wlm for the single-node cluster test, numpy/scipy/h5py
# with pip.

CARGO  ?= cargo
PYTHON ?= python3
BIN    := target/release/fringeflow

.PHONY: demo test deps-system deps-python build sample-data bench clean

deps-system:
	@missing=""; \
	for p in libhdf5-dev pkg-config libfontconfig1-dev fonts-dejavu-core slurm-wlm; do \
	  dpkg -s $$p >/dev/null 2>&1 || missing="$$missing $$p"; \
	done; \
	if [ -n "$$missing" ]; then \
	  echo "== installing$$missing (apt-get)"; \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $$missing >/dev/null; \
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
