# Every target bootstraps .venv from pyproject.toml + constraints.txt if missing.
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
CORES ?= 2
SMK_ARGS ?=
DATA_DIR ?=
RESULTS_DIR ?= results
CONFIG_OVERRIDES := $(if $(DATA_DIR),data_dir=$(DATA_DIR)) results_dir=$(RESULTS_DIR)

.PHONY: run test bench lint lock clean report

$(STAMP): pyproject.toml constraints.txt
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -c constraints.txt -e ".[test]"
	@touch $(STAMP)

run: $(STAMP)
	@mkdir -p $(RESULTS_DIR)
	$(BIN)/tailtrace run --cores $(CORES) --results-dir $(RESULTS_DIR) $(if $(DATA_DIR),--data-dir $(DATA_DIR)) -- $(SMK_ARGS)

test: $(STAMP)
	$(BIN)/python -m pytest $(PYTEST_ARGS)

bench: $(STAMP)
	$(BIN)/python bench/run_bench.py $(BENCH_ARGS)

lint: $(STAMP)
	$(BIN)/snakemake --lint

lock: $(STAMP)
	$(BIN)/python -m pip freeze --exclude-editable | grep -v '^tailtrace' > constraints.txt.new
	mv constraints.txt.new constraints.txt

clean:
	rm -rf results logs benchmarks .snakemake
