# gainchain: the two commands a newcomer needs are `make serve` and `make test`.
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin
HOST   ?= 127.0.0.1
PORT   ?= 8000

.PHONY: serve serve-prod test bench load lint clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --upgrade pip >/dev/null

$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -e . && touch $@

$(VENV)/.installed-test: pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -e '.[test]' && touch $@ $(VENV)/.installed

serve: $(VENV)/.installed
	@$(BIN)/python -m service.devserver --host $(HOST) --port $(PORT)

serve-prod: $(VENV)/.installed
	HOST=$(HOST) PORT=$(PORT) $(BIN)/gunicorn -c docker/gunicorn.conf.py 'service:create_app()'

test: $(VENV)/.installed-test
	$(BIN)/python -m pytest -q

bench: $(VENV)/.installed-test
	$(BIN)/python tests/benchmarks/bench_engine.py

load: $(VENV)/.installed-test
	$(BIN)/python tests/benchmarks/load_check.py

lint: $(VENV)/.installed-test
	$(BIN)/python -m ruff check service schemas exporters tests

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
