#!/usr/bin/env bash
# Installs what tallyd needs to build and test; safe to run again (each step
# is skipped when already done). See DEVELOPERS.md, "Set-up".
set -euo pipefail
cd "$(dirname "$0")/.."

ORT_VERSION=1.24.1
ORT_CACHE=".cache/onnxruntime/${ORT_VERSION}"
ORT_MEMBER="package/bin/napi-v6/linux/x64/libonnxruntime.so.1"
# libavcodec-dev and libswscale-dev (libx264 inside) come with libopencv-dev
# already; named here because the H.264 test camera (capture/testsrv/h264enc)
# builds against them.
DEB_PACKAGES=(libopencv-dev libavcodec-dev libswscale-dev pkg-config g++)

say() { printf 'setup: %s\n' "$*"; }

# 1. Debian packages (OpenCV 4.6 for gocv v0.31.0, a C++ compiler for cgo).
missing=()
for p in "${DEB_PACKAGES[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -gt 0 ]; then
  cmd="apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends ${missing[*]}"
  if [ "$(id -u)" -ne 0 ]; then
    say "missing Debian packages: ${missing[*]}"
    say "run as root: $cmd"
    exit 1
  fi
  say "installing ${missing[*]}"
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
fi

# 1b. Chromium, for the headless browser test of the page (internal/web). The
# test skips without it, so a run that is not root only says how to add it.
if ! command -v chromium >/dev/null && ! command -v chromium-browser >/dev/null; then
  if [ "$(id -u)" -ne 0 ]; then
    say "chromium is missing: the browser test of the page will skip"
    say "run as root: apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends chromium"
  else
    say "installing chromium (browser test of the page)"
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends chromium >/dev/null
  fi
fi

# 2. ONNX Runtime shared library (CPU), unless TALLYD_ORT_LIB names one.
if [ -n "${TALLYD_ORT_LIB:-}" ]; then
  [ -f "$TALLYD_ORT_LIB" ] || { say "TALLYD_ORT_LIB=$TALLYD_ORT_LIB does not exist"; exit 1; }
  say "using ONNX Runtime library $TALLYD_ORT_LIB"
elif [ ! -f "$ORT_CACHE/libonnxruntime.so.1" ]; then
  command -v npm >/dev/null || { say "npm is needed to fetch ONNX Runtime ${ORT_VERSION} (or set TALLYD_ORT_LIB)"; exit 1; }
  say "fetching ONNX Runtime ${ORT_VERSION} shared library (npm package onnxruntime-node, no install scripts)"
  tmp=$(mktemp -d)
  trap 'rm -rf "$tmp"' EXIT
  (cd "$tmp" && npm pack "onnxruntime-node@${ORT_VERSION}" --silent >/dev/null)
  tar -xzf "$tmp/onnxruntime-node-${ORT_VERSION}.tgz" -C "$tmp" "$ORT_MEMBER"
  mkdir -p "$ORT_CACHE"
  mv "$tmp/$ORT_MEMBER" "$ORT_CACHE/libonnxruntime.so.1"
fi

# 3. Go modules, and the linter make lint runs (pinned).
go mod download
STATICCHECK_VERSION=v0.8.2
if [ ! -x .cache/bin/staticcheck ] || ! .cache/bin/staticcheck -version 2>/dev/null | grep -q "${STATICCHECK_VERSION#v}"; then
  say "installing staticcheck ${STATICCHECK_VERSION} into .cache/bin"
  GOBIN="$PWD/.cache/bin" go install "honnef.co/go/tools/cmd/staticcheck@${STATICCHECK_VERSION}"
fi
say "ok"
