# ordwidgets developer commands.  `make test` and `make demo` work on a fresh machine.
VENV ?= .venv
PY := $(VENV)/bin/python
PORT ?= 8866
STAMP := $(VENV)/.installed-stamp

.PHONY: test demo lab bench docs screenshots clean

$(STAMP): pyproject.toml
	test -x $(PY) || python3 -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,demo]'
	touch $(STAMP)

venv: $(STAMP)

# Whole suite: unit, property, notebook and real-browser tests.
# pytest exits 5 when nothing was collected; that is a failure here, not a pass.
test: $(STAMP)
	$(PY) -m pytest tests

# Re-take the user guide's screenshots (docs/img/*.png) from the real-browser tests.
screenshots: $(STAMP)
	OW_UPDATE_SCREENSHOTS=1 $(PY) -m pytest -m browser tests/notebooks

demo: $(STAMP)
	@echo "ordwidgets demo dashboard: http://127.0.0.1:$(PORT)/"
	$(PY) -m voila example_notebooks/tour.ipynb --no-browser --port=$(PORT) \
		--Voila.ip=127.0.0.1 --Voila.port_retries=0

lab: $(STAMP)
	$(PY) -m jupyter lab example_notebooks

bench: $(STAMP)
	$(PY) bench/fit_speed.py

# API reference from the numpydoc docstrings (offline); APIDIR may point elsewhere (tests do).
APIDIR ?= docs/api
docs: $(STAMP)
	$(PY) -m pdoc -d numpy ordwidgets ordwidgets.demo -o $(APIDIR)

clean:
	rm -rf $(VENV) .pytest_cache .hypothesis
