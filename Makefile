PY ?= python3.11
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
PORT ?= 8501

.PHONY: setup run test bench bench-startup bench-page demo clean

$(STAMP): pyproject.toml
	@command -v $(PY) >/dev/null 2>&1 || { echo "need $(PY) on PATH (or run make PY=python3)"; exit 2; }
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/pip install -q --upgrade pip
	$(BIN)/pip install -q -e '.[test,bench]'
	touch $(STAMP)

setup: $(STAMP)

demo/predictions.csv: $(STAMP) demo/generate.py
	$(BIN)/python -m demo.generate --out demo/predictions.csv

demo: demo/predictions.csv

run: setup demo/predictions.csv
	@echo "Fissure page on http://127.0.0.1:$(PORT) (demo data loaded; Ctrl-C stops it)"
	$(BIN)/python -m streamlit run ui/app.py --server.headless true --server.address 127.0.0.1 \
	  --server.port $(PORT) --browser.gatherUsageStats false

test: setup
	$(BIN)/python -m pytest -q; rc=$$?; if [ $$rc -eq 5 ]; then echo "pytest collected no tests"; exit 0; fi; exit $$rc

bench: setup
	$(BIN)/python bench/startup_bench.py
	$(BIN)/python bench/slices_bench.py

bench-startup: setup
	$(BIN)/python bench/startup_bench.py

# Several people at once: four real Chromium sessions against the page, beside the floor page (about 6 min).
bench-page: setup
	$(BIN)/python bench/page_sessions_bench.py

clean:
	rm -rf $(VENV) .pytest_cache demo/predictions.csv
