# tallyd: see README.md for what each target does.
GO       ?= go
BIN      := bin/tallyd
STATICCHECK := .cache/bin/staticcheck
# gocv's leak-counting build: every test step uses it, so the OpenCV bindings
# are compiled once (TestNoMatLeak needs it; the cost per Mat is a stack trace).
TAGS := matprofile

.PHONY: setup build demo test lint bench clean install

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

# Install the binary, the ONNX Runtime library where tallyd looks for it
# (PREFIX/lib/tallyd), an example site file and the systemd unit. See the
# README, "Running as a service". DESTDIR stages the files for packaging.
PREFIX  ?= /usr/local
SYSCONF ?= /etc
ORT_LIB := .cache/onnxruntime/1.24.1/libonnxruntime.so.1
install: build
	install -D -m 0755 $(BIN) $(DESTDIR)$(PREFIX)/bin/tallyd
	install -D -m 0644 $(ORT_LIB) $(DESTDIR)$(PREFIX)/lib/tallyd/libonnxruntime.so.1
	install -D -m 0644 deploy/site.yaml.example $(DESTDIR)$(SYSCONF)/tallyd/site.yaml.example
	install -D -m 0644 README.md $(DESTDIR)$(PREFIX)/share/doc/tallyd/README.md
	sed 's|/usr/local|$(PREFIX)|g; s|/etc/tallyd|$(SYSCONF)/tallyd|g' deploy/tallyd.service > tallyd.service.tmp
	install -D -m 0644 tallyd.service.tmp $(DESTDIR)$(SYSCONF)/systemd/system/tallyd.service
	rm -f tallyd.service.tmp
	@echo "installed; next: create the user and the site file (README, \"Running as a service\")"

clean:
	rm -rf bin
