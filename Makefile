# tallyd: see README.md for what each target does.
GO       ?= go
BIN      := bin/tallyd
STATICCHECK := .cache/bin/staticcheck

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
# ONNX Runtime below them run once, without it (scripts/pkgs.sh sorts them).
# Generated-scene counting runs one seed here; `make bench` runs them all.
test: setup lint
	$(GO) test -race $$(bash scripts/pkgs.sh pure)
	$(GO) test -timeout 20m $$(bash scripts/pkgs.sh cgo)
	$(GO) test -tags matprofile -run TestNoMatLeak -count=1 ./capture/ ./detect/onnx/ ./internal/pipeline/

lint: setup
	$(GO) vet ./...
	$(STATICCHECK) ./...

bench: setup
	@bash scripts/bench.sh

clean:
	rm -rf bin
