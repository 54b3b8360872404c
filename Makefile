# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
PY      ?= python3
VENV    := .venv
VPY     := $(VENV)/bin/python
STAMP   := $(VENV)/.installed-test
DEMO    := examples/harbour

.PHONY: demo test bench fuzz schema clean

$(VPY):
	$(PY) -m venv $(VENV)
	$(VPY) -m pip install -q --upgrade pip

$(VENV)/.installed: pyproject.toml | $(VPY)
	$(VPY) -m pip install -q -e .
	touch $@

$(STAMP): pyproject.toml | $(VPY)
	$(VPY) -m pip install -q -e '.[test]'
	touch $@ $(VENV)/.installed

demo: $(VENV)/.installed
	@echo "== a plan that should pass"
	@echo "$$ plansieve check --domain $(DEMO)/domain.pddl --problem $(DEMO)/problem.pddl $(DEMO)/plan-good.plan"
	@$(VENV)/bin/plansieve check --domain $(DEMO)/domain.pddl --problem $(DEMO)/problem.pddl \
	    $(DEMO)/plan-good.plan; rc=$$?; echo "(exit code $$rc: 0 means valid)"; [ $$rc -eq 0 ]
	@echo
	@echo "== a plan that should fail; --keep-going reports every problem in one run"
	@echo "$$ plansieve check --keep-going --domain $(DEMO)/domain.pddl --problem $(DEMO)/problem.pddl $(DEMO)/plan-broken.plan"
	@$(VENV)/bin/plansieve check --keep-going --domain $(DEMO)/domain.pddl \
	    --problem $(DEMO)/problem.pddl $(DEMO)/plan-broken.plan; \
	    rc=$$?; echo "(exit code $$rc: 1 means not valid)"; [ $$rc -eq 1 ]

test: $(STAMP)
	$(VPY) -m pytest -q -p no:cacheprovider; rc=$$?; if [ $$rc -eq 5 ]; then echo "no tests collected"; exit 1; fi; exit $$rc

bench: $(STAMP)
	$(VPY) bench/run_all.py

# The long runs: fuzzing at full size (about 15 minutes) and ten times the oracle comparison.
fuzz: $(STAMP)
	PLANSIEVE_FUZZ_EXAMPLES=5000 $(VPY) -m pytest -q -p no:cacheprovider -m slow tests
	PLANSIEVE_ORACLE_PLANS=2200 $(VPY) -m pytest -q -p no:cacheprovider tests/test_oracle_differential.py

# Rewrite docs/schema/ from the models (tests/test_schema.py says when it is stale).
schema: $(VENV)/.installed
	$(VPY) -c "from plansieve.report import SCHEMA_PATH, schema_text; SCHEMA_PATH.parent.mkdir(parents=True, exist_ok=True); SCHEMA_PATH.write_text(schema_text())"
	$(VPY) -c "from plansieve.loop.events import SCHEMA_PATH, schema_text; SCHEMA_PATH.write_text(schema_text())"

clean:
	rm -rf $(VENV) build dist *.egg-info
