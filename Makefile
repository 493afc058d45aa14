# Brightfold. `make run` and `make test` are the two set-up commands.
SHELL := /bin/bash
GO ?= go
BIN := bin/brightfold
export BRIGHTFOLD_ORT_LIB ?= $(CURDIR)/.cache/onnxruntime/libonnxruntime.so.1
export LANG ?= C.UTF-8

.PHONY: demo-remake evaluate-register setup build run demo test vet fuzz screenshot-check bench demo-model evaluate evaluate-maps evaluate-lrp-rules clean

setup:
	@scripts/setup.sh

build: setup
	@$(GO) build -o $(BIN) ./cmd/brightfold

# Opens the viewer on the demo cohort; with no display, runs the headless demo.
run: build
	@if [ -n "$$DISPLAY$$WAYLAND_DISPLAY" ]; then $(BIN) $(ARGS); else scripts/demo-headless.sh $(BIN); fi

demo: build
	@scripts/demo-headless.sh $(BIN)

# gofmt, go vet, staticcheck (pinned; run by module version so that it does
# not enter go.mod) and go mod tidy must leave nothing to change. ST1005 is off:
# error strings here often start with a tensor or DICOM attribute name.
STATICCHECK := honnef.co/go/tools/cmd/staticcheck@v0.8.2
vet:
	@test -z "$$(gofmt -l $$(git ls-files '*.go'))" || { echo "gofmt would change:"; gofmt -l $$(git ls-files '*.go'); exit 1; }
	@$(GO) mod tidy -diff >/dev/null || { echo "go mod tidy would change go.mod or go.sum:"; $(GO) mod tidy -diff; exit 1; }
	@$(GO) vet ./...
	@$(GO) run $(STATICCHECK) -checks inherit,-ST1005 ./...

test: setup vet
	$(GO) test -count=1 -timeout 20m ./...
	@FUZZTIME=$${FUZZTIME:-5s} scripts/fuzz.sh
	@scripts/screenshot-check.sh

fuzz:
	@FUZZTIME=$${FUZZTIME:-60s} scripts/fuzz.sh

screenshot-check: build
	@scripts/screenshot-check.sh

bench: setup
	@scripts/bench.sh

demo-model: setup
	@scripts/demo-model.sh

# model make on the committed demo model with the demo recipe's cases,
# compared with its card (tens of minutes; issue 13).
demo-remake: setup
	@scripts/demo-remake.sh

# Figures of the demo model folder on fresh phantoms and real scans (docs/evaluation.md).
evaluate: setup
	@scripts/evaluate.sh

# The full alignment recovery evaluation (30 transforms, dipy on every pair; internal/register).
evaluate-register: setup
	@scripts/evaluate-register.sh

# Relevance-map localisation and input shares on 50 phantoms (docs/evaluation.md).
evaluate-maps: setup
	@scripts/evaluate-maps.sh

# The LRP rule search alone: composite candidates on 50 phantoms of the tuning seed (docs/evaluation.md).
evaluate-lrp-rules: setup
	@SEARCH_ONLY=1 scripts/evaluate-maps.sh

clean:
	rm -rf bin out
