# Two entry points, each works on a fresh machine with python3 (>= 3.11) and make:
#   make demo   create .venv, install geoflow, run the invented demo valley -> out/demo/
#   make demo-lidar  the demo river's first meander on a LiDAR-like DEM with five surveyed sections
#   make test   create .venv, install geoflow with test extras, run the test suite
#   make lint   ruff (pyflakes, imports, bugbear, complexity) and mypy on geoflow/hydraulics
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: demo demo-lidar test lint bench clean

$(BIN)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@

demo: $(BIN)/.installed
	$(BIN)/geoflow run configs/demo.toml

demo-lidar: $(BIN)/.installed
	$(BIN)/geoflow run configs/demo_lidar.toml

test: $(BIN)/.installed
	$(BIN)/python -m pytest -q

lint: $(BIN)/.installed
	$(BIN)/ruff check geoflow tests benchmarks sample_gis
	$(BIN)/mypy

bench: $(BIN)/.installed
	$(BIN)/python benchmarks/bench_hydraulics.py
	$(BIN)/python benchmarks/bench_mapping.py --size 4000
	$(BIN)/python benchmarks/bench_batch.py
	$(BIN)/python benchmarks/bench_cases.py --length 2000
	$(BIN)/python benchmarks/bench_report.py
	$(BIN)/python benchmarks/bench_network.py --quick

clean:
	rm -rf out .pytest_cache .hypothesis
