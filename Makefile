# Two commands a new user needs: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin

.PHONY: demo test bench demo-batch clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip

$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -q -e .
	touch $@

$(VENV)/.installed-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -q -e '.[test]'
	touch $@ $(VENV)/.installed

demo: $(VENV)/.installed
	$(BIN)/python demo_logs/make_day.py --out demo_logs
	@mkdir -p demo_out
	$(BIN)/countmill convert demo_logs/brewhouse-2026-11-03.csv --map channel_maps/brewhouse.toml -o demo_out/brewhouse-2026-11-03.parquet --summary; \
	  rc=$$?; if [ $$rc -ne 0 ] && [ $$rc -ne 3 ]; then exit $$rc; fi
	$(BIN)/countmill report demo_out/brewhouse-2026-11-03.parquet -o demo_out/report.html

test: $(VENV)/.installed-test
	$(BIN)/python -m pytest -q

bench: $(VENV)/.installed-test
	$(BIN)/python benchmarks/run.py

clean:
	rm -rf $(VENV) demo_out

# Three demo days in demo_inbox/, converted by the nightly batch into demo_out/batch/
# (exit 3 is fine: the demo days hold lines the converter rejects on purpose).
demo-batch: $(VENV)/.installed
	$(BIN)/python demo_logs/make_day.py --days 3 --out demo_inbox
	@mkdir -p demo_out
	$(BIN)/countmill batch demo_inbox --map channel_maps/brewhouse.toml --out demo_out/batch --settle 0; \
	  rc=$$?; if [ $$rc -ne 0 ] && [ $$rc -ne 3 ]; then exit $$rc; fi
