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

# serve-prod: the production stack on this machine, exactly as the container runs it: nginx
# (the front: slow-client timeouts, buffering, per-client limits) before gunicorn's workers.
# For checking a release locally; in production use the image, compose or docker/k8s.
serve-prod: $(VENV)/.installed
	@echo "serve-prod: nginx front on $(HOST):$(PORT) before gunicorn (as in the container); needs nginx (apt-get install nginx)"
	HOST=$(HOST) PORT=$(PORT) $(BIN)/python docker/front.py

# test: the suite on JOBS processes (pytest-xdist), then the tests marked `serial` (a live
# server's latency under load) alone, so no other test competes with them for the cores.
JOBS ?= 2
test: $(VENV)/.installed-test
	$(BIN)/python -m pytest -q -n $(JOBS) -m "not serial"
	$(BIN)/python -m pytest -q -m serial

bench: $(VENV)/.installed-test
	$(BIN)/python tests/benchmarks/bench_engine.py

load: $(VENV)/.installed-test
	$(BIN)/python tests/benchmarks/load_check.py

lint: $(VENV)/.installed-test
	$(BIN)/python -m ruff check service schemas exporters tests

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
