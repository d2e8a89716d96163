# metertop: set-up, demo, tests and benchmarks.
# `make demo` and `make test` create .venv when it is missing and install
# metertop into it with every optional extra.

PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.metertop-installed

.PHONY: demo test bench bench-full bench-speed bench-batch bench-check bench-robust bench-audio install clean-venv check-boost figures

install: $(STAMP)

$(STAMP): pyproject.toml
	@bash .ci/ensure_boost.sh
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[all]"
	@touch $(STAMP)

check-boost:
	@bash .ci/ensure_boost.sh

demo: $(STAMP)
	$(BIN)/metertop analyse demo_rhythms/*.mid demo_rhythms/*.csv demo_rhythms/*.ogg demo_rhythms/*.abc demo_rhythms/*.musicxml

# The README's demo figure (docs/), drawn again from the demo file.
figures: $(STAMP)
	$(BIN)/metertop plot demo_rhythms/tidewater_lighthouse_steps_7-8.mid -o docs/figure_lighthouse_steps_7-8.png --force

test: $(STAMP)
	$(BIN)/python -m pytest

clean-venv:
	rm -rf $(VENV)

bench: $(STAMP)
	$(BIN)/python bench/run.py

bench-full: $(STAMP)
	$(BIN)/python bench/run.py --full

bench-speed: $(STAMP)
	$(BIN)/python bench/speed.py

bench-batch: $(STAMP)
	$(BIN)/python bench/batch_bench.py

bench-check: $(STAMP)
	$(BIN)/python bench/check_bench.py

bench-robust: $(STAMP)
	$(BIN)/python bench/robust.py

bench-audio: $(STAMP)
	$(BIN)/python bench/audio_bench.py
