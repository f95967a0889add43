# Two commands on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
PIP    := $(VENV)/bin/pip

.PHONY: demo test bench grid clean check-report

$(VENV)/bin/activate:
	$(PYTHON) -m venv $(VENV)
	$(PIP) install --quiet --upgrade pip

# Runtime install (what `make demo` needs).
$(VENV)/.runtime: pyproject.toml | $(VENV)/bin/activate
	$(PIP) install --quiet -e .
	touch $@

# Test install: runtime + the independent reference libraries the checks use.
$(VENV)/.testdeps: pyproject.toml | $(VENV)/bin/activate
	$(PIP) install --quiet -e ".[test,grid]"
	touch $@ $(VENV)/.runtime

demo: $(VENV)/.runtime
	$(VENV)/bin/prioritize demo

test: $(VENV)/.testdeps
	$(PY) -m pytest -q

bench: $(VENV)/.testdeps
	$(PY) benchmarks/run_all.py

# Render the report in headless Chromium and check the screenshot is not blank.
check-report: $(VENV)/.runtime
	@test -x /usr/bin/chromium || (apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends chromium)
	$(PY) scripts/check_report.py --screenshot report_screenshot.png

# Rebuild the shipped track grid (needs the `grid` extra; see DEVELOPERS.md).
grid: $(VENV)/.testdeps
	$(PY) -m prioritize.data.build_tracks

clean:
	rm -rf $(VENV) .pytest_cache build *.egg-info
