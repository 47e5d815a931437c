# tallyd: see README.md for what each target does.
GO       ?= go
BIN      := bin/tallyd
PURE_PKGS := ./capture/mailbox/... ./capture/scene/... ./capture/testsrv/... ./detect ./track/... ./events/... ./internal/config/... ./internal/motfmt/...

.PHONY: setup build demo test bench race clean

setup:
	@bash scripts/setup.sh

build: setup
	$(GO) build -o $(BIN) ./cmd/tallyd

# The main job on the embedded defaults: a generated ferry-terminal scene,
# the motion detector and an embedded NATS server; counts beside the truth.
demo: build
	./$(BIN) replay -c configs/demo.yaml

test: setup
	$(GO) vet ./...
	$(GO) test -race $(PURE_PKGS)
	$(GO) test -timeout 40m ./...
	$(GO) test -tags matprofile -run TestNoMatLeak -count=1 ./capture/ ./detect/onnx/ ./internal/pipeline/

bench: setup
	@bash scripts/bench.sh

clean:
	rm -rf bin
