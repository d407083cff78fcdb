# Every target creates the local virtual environment when it is missing (or when pyproject.toml changed).
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed
DEMO   := profiles/wren.toml

.PHONY: run test bench clean

$(STAMP): pyproject.toml
	python3 -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	touch $(STAMP)

run: $(STAMP)
	$(VENV)/bin/diffdeck drive $(DEMO)

test: $(STAMP)
	$(VENV)/bin/ruff check shaping console
	$(VENV)/bin/mypy
	$(PY) -m pytest -q

bench: $(STAMP)
	@$(PY) -m tests.benchmarks

clean:
	rm -rf $(VENV) build *.egg-info
