# Two commands set everything up on a fresh machine:
#   make demo   - run the main job on the built-in simulated fan rig
#   make test   - run the whole test suite (Python and the C firmware stub)
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: demo test venv bench firmware-test pil clean

$(STAMP): pyproject.toml
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

venv: $(STAMP)

demo: $(STAMP)
	$(PY) -m rigloop demo

test: $(STAMP)
	$(MAKE) -C firmware_stub test
	@status=0; $(MAKE) pil || status=1; \
	QT_QPA_PLATFORM=offscreen $(PY) -m pytest -m "not pil" || status=1; exit $$status

# Processor in the loop: the STM32F4 firmware on QEMU's netduinoplus2, rigloop sessions against
# it over a pty. Prints a SKIP line (and succeeds) without qemu-system-arm / arm-none-eabi-gcc.
pil: $(STAMP)
	QT_QPA_PLATFORM=offscreen $(PY) tests/pil/run_pil.py

bench: $(STAMP)
	$(PY) bench/run_all.py

clean:
	rm -rf $(VENV) build dist src/*.egg-info
	$(MAKE) -C firmware_stub clean
