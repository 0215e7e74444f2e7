# streamtab: the two set-up commands are `make run` and `make test`; `make check` lints, format-checks and type-checks;
# `make bench` measures.
PY      ?= python3
VENV    := .venv
BIN     := $(VENV)/bin
STAMP   := $(VENV)/.streamtab-installed
DEMO    ?= .demo-data
XVFB    := xvfb-run -a -s "-screen 0 1280x800x24"

.PHONY: run test check format-report bench sysdeps-run sysdeps-test clean-demo

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PY) -m venv $(VENV)
	@echo "streamtab: installing into $(VENV) (log: $(VENV)/install.log)"
	@{ $(BIN)/python -m pip install --upgrade pip && $(BIN)/python -m pip install -e '.[test,check]'; } \
		> $(VENV)/install.log 2>&1 || { tail -n 20 $(VENV)/install.log; exit 1; }
	@touch $(STAMP)

sysdeps-run:
	@bash .ci/sysdeps.sh run

sysdeps-test:
	@bash .ci/sysdeps.sh test

# Opens the touch app on a demo data folder seeded from sample_trips/ on first start.
run: sysdeps-run $(STAMP)
	@if [ "$$(uname)" = Linux ] && [ -z "$$DISPLAY" ] && [ -z "$$WAYLAND_DISPLAY" ]; then \
		echo "streamtab: no display here, so the app cannot open a window; to draw the demo's stop screen to a file run: $(BIN)/streamtab app --data-dir $(DEMO) --seed-demo sample_trips --snapshot stop.png --screen stop"; \
	else $(BIN)/streamtab app --data-dir $(DEMO) --seed-demo sample_trips; fi

# Passes every test with no display attached: Xvfb is started when DISPLAY is unset.
test: sysdeps-test $(STAMP)
	@if [ -z "$$DISPLAY" ]; then $(XVFB) $(BIN)/python -m pytest $(PYTEST_ARGS); \
	else $(BIN)/python -m pytest $(PYTEST_ARGS); fi

# Lint and format (ruff), types (mypy on core and sync) and the import layers (import-linter, contracts
# in pyproject.toml). `make format-report` shows what `ruff format` would change without changing it.
check: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/mypy
	$(BIN)/lint-imports

format-report: $(STAMP)
	-$(BIN)/ruff format --check .

# Benchmarks print medians and ratios; they are never part of `make test`.
bench: sysdeps-test $(STAMP)
	@if [ -z "$$DISPLAY" ]; then $(XVFB) $(BIN)/python -m tests.bench; \
	else $(BIN)/python -m tests.bench; fi

clean-demo:
	rm -rf $(DEMO)
