# Set-up is part of each target: the virtual environment is made once and reused.
VENV  := .venv
PY    := $(VENV)/bin/python
STAMP := $(VENV)/.installed-stamp

.PHONY: test demo bench edgevib clean

$(STAMP): pyproject.toml
	test -x $(PY) || python3 -m venv $(VENV)
	$(PY) -m pip install -q --disable-pip-version-check -e '.[test]'
	touch $(STAMP)

test: $(STAMP)
	$(PY) -m pytest -q

demo: $(STAMP)
	$(VENV)/bin/edgevib demo --out demo_out --gapless-hours 2

bench: $(STAMP)
	$(VENV)/bin/edgevib bench --json

# any edgevib command: make edgevib ARGS="replay REC --params P.msgpack"
edgevib: $(STAMP)
	$(VENV)/bin/edgevib $(ARGS)

clean:
	rm -rf $(VENV) demo_out .pytest_cache
