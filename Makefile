# One-command set-up: every target creates .venv and installs what it needs.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench fuzz clean

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PY) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	# the cairo 2D library behind figures (cairocffi loads it): installed with apt where we are root and it is missing
	-@if ! ldconfig -p 2>/dev/null | grep -q libcairo.so.2; then \
	  if command -v apt-get >/dev/null && [ "$$(id -u)" = 0 ]; then \
	    (apt-get update -qq && apt-get install -y -qq libcairo2 >/dev/null) || echo "note: could not install libcairo2; figures fall back to the 3D raster and SVG/PDF are refused"; \
	  else echo "note: libcairo2 is missing and there is no root apt-get: install it (apt install libcairo2) for SVG/PDF figures"; fi; fi
	# the Khronos glTF validator, used by the tests (skipped only where npm is absent)
	-command -v npm >/dev/null && npm install --no-save --silent gltf-validator@2.0.0-dev.3.10
	touch $(STAMP)

# make demo regenerates the showcase: it rewrites its own files under exports/<scene>/
# (crystalview demo on its own refuses to overwrite them without --force)
demo: $(STAMP)
	$(BIN)/crystalview demo --force

test: $(STAMP)
	# headless Chromium for the web-page tests (they skip where it is absent): installed with apt where we are root
	-@if ! command -v chromium >/dev/null && ! command -v chromium-browser >/dev/null && ! command -v google-chrome >/dev/null; then \
	  if command -v apt-get >/dev/null && [ "$$(id -u)" = 0 ]; then \
	    (apt-get update -qq && apt-get install -y -qq chromium >/dev/null) || echo "note: could not install chromium; the web-page tests will be skipped"; \
	  else echo "note: no chromium and no root apt-get; the web-page tests will be skipped"; fi; fi
	$(BIN)/python -m pytest

bench: $(STAMP)
	for f in bench/bench_*.py; do echo "== $$f"; $(BIN)/python $$f || exit 1; done

fuzz: $(STAMP)
	CRYSTALVIEW_FUZZ_EXAMPLES=20000 $(BIN)/python -m pytest tests/test_fuzz.py tests/test_fuzz_cif.py -q -p no:cacheprovider

clean:
	rm -rf $(VENV) build *.egg-info
