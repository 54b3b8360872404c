# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
PY      ?= python3
VENV    := .venv
VPY     := $(VENV)/bin/python
STAMP   := $(VENV)/.installed-test
DEMO    := examples/harbour
DEMO_SEED := 0

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

CHECK   := $(VENV)/bin/plansieve check --domain $(DEMO)/domain.pddl --problem $(DEMO)/problem.pddl --limits $(DEMO)/limits.toml
RUN     := $(VENV)/bin/plansieve run --domain $(DEMO)/domain.pddl --problem $(DEMO)/problem.pddl --limits $(DEMO)/limits.toml

# Each step states the exit code it expects and fails the demo if it gets another.
demo: $(VENV)/.installed
	@echo "== 1. a plan that keeps every rule of the shift"
	@echo "$$ plansieve check --limits $(DEMO)/limits.toml ... $(DEMO)/plan-good.plan"
	@$(CHECK) $(DEMO)/plan-good.plan; rc=$$?; echo "(exit code $$rc: 0 means valid)"; [ $$rc -eq 0 ]
	@echo
	@echo "== 2. a hurried plan; --keep-going reports every problem in one run"
	@$(CHECK) --keep-going $(DEMO)/plan-broken.plan; rc=$$?; echo "(exit code $$rc: 1 means not valid)"; [ $$rc -eq 1 ]
	@echo
	@echo "== 3. every step works, but the shift budget is overspent"
	@$(CHECK) $(DEMO)/plan-over-budget.plan; rc=$$?; echo "(exit code $$rc)"; [ $$rc -eq 1 ]
	@echo
	@echo "== 4. every step works, but the customs slot is missed"
	@$(CHECK) $(DEMO)/plan-late.plan; rc=$$?; echo "(exit code $$rc)"; [ $$rc -eq 1 ]
	@echo
	@echo "== 5. the loop: the local guesser proposes plans with mistakes, the critics' findings go back as feedback"
	@mkdir -p demo-output && rm -f demo-output/harbour-trace.jsonl
	@echo "$$ plansieve run --limits $(DEMO)/limits.toml ... --mistakes 0.08 --seed $(DEMO_SEED) --show-feedback --trace demo-output/harbour-trace.jsonl"
	@$(RUN) --mistakes 0.08 --seed $(DEMO_SEED) --show-feedback \
	    --trace demo-output/harbour-trace.jsonl --plan-out demo-output/harbour-verified.plan; \
	    rc=$$?; echo "(exit code $$rc: 0 means a plan was verified)"; [ $$rc -eq 0 ]

test: $(STAMP)
	$(VPY) -m pytest -q -p no:cacheprovider; rc=$$?; if [ $$rc -eq 5 ]; then echo "no tests collected"; exit 1; fi; exit $$rc

bench: $(STAMP)
	$(VPY) bench/run_all.py

# The long runs: fuzzing at full size (about 15 minutes) and ten times the oracle comparison.
fuzz: $(STAMP)
	PLANSIEVE_FUZZ_EXAMPLES=5000 $(VPY) -m pytest -q -p no:cacheprovider -m slow tests
	PLANSIEVE_ORACLE_PLANS=2200 $(VPY) -m pytest -q -p no:cacheprovider tests/test_oracle_differential.py
	PLANSIEVE_FUZZ_EXAMPLES=5000 $(VPY) -m pytest -q -p no:cacheprovider tests/test_http_fuzz.py

# Rewrite docs/schema/ from the models (tests/test_schema.py says when it is stale).
schema: $(VENV)/.installed
	$(VPY) -c "from plansieve.report import SCHEMA_PATH, schema_text; SCHEMA_PATH.parent.mkdir(parents=True, exist_ok=True); SCHEMA_PATH.write_text(schema_text())"
	$(VPY) -c "from plansieve.loop.events import SCHEMA_PATH, schema_text; SCHEMA_PATH.write_text(schema_text())"
	$(VPY) -c "from plansieve.adapters.config_file import SCHEMA_PATH, schema_text; SCHEMA_PATH.write_text(schema_text())"

clean:
	rm -rf $(VENV) build dist *.egg-info demo-output
