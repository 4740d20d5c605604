# fringeflow: the two commands of the README, and their helpers.
# `make demo` and `make test` install what they need on a fresh Debian 12
# machine (as root): libhdf5-dev (and fontconfig + a font for plots) with
# apt-get, slurm-wlm for the single-node cluster test, chromium and
# chromium-driver for the report's browser test, numpy/scipy/h5py
# (cross-checks), Pillow (independent PNG decoding) and selenium with pip.

CARGO  ?= cargo
PYTHON ?= python3
BIN    := target/release/fringeflow

.PHONY: demo test deps-system deps-test deps-python build sample-data bench bench-report bench-memory fuzz clean python python-test

APT_PACKAGES := libhdf5-dev pkg-config libfontconfig1-dev fonts-dejavu-core

deps-system:
	@missing=""; \
	for p in $(APT_PACKAGES); do \
	  dpkg -s $$p >/dev/null 2>&1 || missing="$$missing $$p"; \
	done; \
	if [ -n "$$missing" ]; then \
	  echo "== installing$$missing (apt-get)"; \
	  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $$missing >/dev/null; \
	fi

# The cluster test needs Slurm's daemons and clients; the report test a
# real browser (Chromium, driven through chromium-driver).
deps-test:
	@$(MAKE) --no-print-directory deps-system APT_PACKAGES="$(APT_PACKAGES) slurm-wlm chromium chromium-driver"

deps-python:
	@if ! $(PYTHON) -c "import numpy, scipy, h5py, PIL, matplotlib, selenium, tifffile, blake3" >/dev/null 2>&1; then \
	  echo "== installing numpy, scipy, h5py, pillow, matplotlib, selenium, tifffile, blake3 (pip)"; \
	  $(PYTHON) -m pip install -q numpy scipy h5py pillow matplotlib selenium tifffile blake3; \
	fi

build: deps-system
	$(CARGO) build --release --locked

demo: build
	$(BIN) inspect sample-data/layered-phantom.h5
	$(BIN) run sample-data/layered-phantom.h5 --pipeline pipelines/default.toml --out out/demo
	@echo "images: out/demo/layered-phantom/bscan-*.png; volume: out/demo/layered-phantom/volume.h5; log: out/demo/layered-phantom/log.json"
	@echo "report: out/demo/layered-phantom/report.html; batch page: out/demo/index.html (open them in a browser)"
	@mkdir -p out/demo-captures
	$(BIN) simulate sample-data/flow-phantom.toml --out out/demo-captures/flow-phantom.h5
	$(BIN) run out/demo-captures/flow-phantom.h5 --pipeline pipelines/flow.toml --out out/demo
	@echo "flow: out/demo/flow-phantom/bscan-*.png (structure), doppler-*.png (velocity, mm/s), angiography-decorrelation-*.png and angiography-decorrelation-en-face.png (motion contrast)"
	@echo "layer-bounded angiograms: out/demo/flow-phantom/slab-upper-layer-angiography-decorrelation.png and slab-lower-layer-*.png (each layer's vessel alone); thickness map: thickness-top-interface.png; surfaces-*.png"
	@echo "pages: out/demo/layered-phantom/report.html, out/demo/flow-phantom/report.html and out/demo/index.html"
	$(BIN) run sample-data/layered-phantom.h5 --pipeline pipelines/layers.toml --out out/demo-layers
	@echo "layers: out/demo-layers/layered-phantom/surfaces-*.png (the surfaces over the B-scans), thickness-*.png (maps with a colour bar in µm); /surfaces_um and /thickness_um in its volume.h5; thickness per layer in its log.json"

# The tests keep the measured kernel choices (pipeline/fused/tune.rs) in
# target/, not in the user's cache folder.
test: deps-test deps-python build
	FRINGEFLOW_CACHE_DIR=$(CURDIR)/target/kernel-cache $(CARGO) test --workspace --locked -- --test-threads=2
	@$(MAKE) --no-print-directory python-test

# The Python package (python/, PyO3 + maturin): built and installed with
# pip when missing or older than its sources, then its pytest suite, run
# against the release binary.
PY_STAMP := target/python-installed.stamp
PY_SOURCES := $(shell find src crates python/src python/fringeflow -type f 2>/dev/null) Cargo.toml Cargo.lock python/Cargo.toml python/pyproject.toml
$(PY_STAMP): $(PY_SOURCES)
	@echo "== building and installing the Python package (pip install ./python)"
	$(PYTHON) -m pip install -q ./python
	@mkdir -p target && touch $@

python: deps-system deps-python $(PY_STAMP)

python-test: python
	@$(PYTHON) -c "import pytest" >/dev/null 2>&1 || $(PYTHON) -m pip install -q pytest
	FRINGEFLOW_CACHE_DIR=$(CURDIR)/target/kernel-cache FRINGEFLOW_BIN=$(CURDIR)/$(BIN) HDF5_USE_FILE_LOCKING=FALSE $(PYTHON) -m pytest -q -p no:cacheprovider --import-mode=importlib python/tests
	$(PYTHON) examples/bscan_figure.py sample-data/layered-phantom.h5 out/examples/bscan.png

# Rewrite the sample capture from its scene (deterministic: same bytes).
sample-data: build
	$(BIN) simulate sample-data/layered-phantom.toml --out sample-data/layered-phantom.h5

bench: deps-system
	$(CARGO) bench --locked

# Throughput report: bare FFT vs the full pipeline in one process (Rust),
# then the NumPy/SciPy peer on the same capture and the speed-up.
bench-report: build deps-python
	mkdir -p out/bench
	$(BIN) bench --json out/bench/report.json
	$(PYTHON) benches/numpy_peer.py out/bench/throughput-v2.h5 --report out/bench/report.json
	@$(MAKE) --no-print-directory python
	$(PYTHON) benches/python_speed.py out/bench/throughput-v2.h5

# Peak memory of `run` on a simulated 2 GB capture (default pipeline).
# Needs about 4.5 GB of disk under out/bench-memory.
bench-memory: build
	@command -v /usr/bin/time >/dev/null || (apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq time >/dev/null)
	mkdir -p out/bench-memory
	test -f out/bench-memory/large.h5 || $(BIN) simulate benches/memory-scene.toml --out out/bench-memory/large.h5
	ls -l out/bench-memory/large.h5
	/usr/bin/time -v $(BIN) run out/bench-memory/large.h5 --pipeline pipelines/default.toml --out out/bench-memory/recon --quiet 2> out/bench-memory/time.txt
	@grep -E "Maximum resident|Elapsed" out/bench-memory/time.txt
	@grep -E '"peak_resident_mb"|"alines_per_second"' out/bench-memory/recon/large/log.json

# Longer property-based fuzzing of the pipeline parser and capture reader.
fuzz: deps-system
	PROPTEST_CASES=50000 $(CARGO) test --release --locked --test fuzz_inputs

clean:
	$(CARGO) clean
	rm -rf out
