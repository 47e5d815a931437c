# tallyd: see README.md for what each target does.
GO       ?= go
BIN      := bin/tallyd
STATICCHECK := .cache/bin/staticcheck
# gocv's leak-counting build: every test step uses it, so the OpenCV bindings
# are compiled once (TestNoMatLeak needs it; the cost per Mat is a stack trace).
TAGS := matprofile

.PHONY: setup build demo test lint bench clean

setup:
	@bash scripts/setup.sh

build: setup
	$(GO) build -o $(BIN) ./cmd/tallyd

# The main job on the embedded defaults: a generated ferry-terminal scene,
# the motion detector and an embedded NATS server; counts beside the truth.
demo: build
	./$(BIN) replay -c configs/demo.yaml

# Pure-Go packages run once, with the race detector; packages with OpenCV or
# ONNX Runtime below them run once, without it (scripts/pkgs.sh sorts them;
# scripts/test.sh runs both at once). Generated-scene counting runs one seed
# here; `make bench` runs them all.
test: setup lint
	@GO=$(GO) TAGS=$(TAGS) bash scripts/test.sh

lint: setup
	$(GO) vet -tags $(TAGS) ./...
	$(STATICCHECK) -tags $(TAGS) ./...

bench: setup
	@bash scripts/bench.sh

clean:
	rm -rf bin
