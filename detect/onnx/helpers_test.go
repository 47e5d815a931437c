package onnx

import (
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"

	"tallyd/capture"
)

// Test data: fixtures committed under testdata/onnx (scripts/onnx_fixtures.py
// writes them), real data read from ../shared beside the checkout.
const (
	fixtureDir = "../../testdata/onnx"
	sharedDir  = "../../../shared"
)

func fixture(name string) string { return filepath.Join(fixtureDir, name) }

// sharedFile returns a file of ../shared or skips the test when it is absent.
func sharedFile(t testing.TB, rel string) string {
	t.Helper()
	p := filepath.Join(sharedDir, rel)
	if _, err := os.Stat(p); err != nil {
		t.Skipf("shared data absent (%v); tests read models and footage from ../shared beside the checkout", err)
	}
	return p
}

// ortLib returns the ONNX Runtime library for tests, or skips: $TALLYD_ORT_LIB,
// else the copy `make setup` keeps in the checkout's .cache.
func ortLib(t testing.TB) string {
	t.Helper()
	p := os.Getenv(ORTLibEnv)
	if p == "" {
		p = filepath.Join("../..", ortCachePath)
	}
	if _, err := os.Stat(p); err != nil {
		t.Skipf("ONNX Runtime %s library absent (%v); run make setup or set %s", ORTVersion, err, ORTLibEnv)
	}
	return p
}

// testConfig is Defaults for a model, with the test library.
func testConfig(t testing.TB, model string, engine Engine) Config {
	t.Helper()
	cfg := Defaults()
	cfg.Model, cfg.Engine = model, engine
	if engine == EngineORT {
		cfg.Library = ortLib(t)
	}
	return cfg
}

func mustNew(t testing.TB, cfg Config) *Detector {
	t.Helper()
	d, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = d.Close() })
	return d
}

// uniformFrame is a w x h BGR frame of one grey value.
func uniformFrame(w, h int, v uint8) *capture.Frame {
	m := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(float64(v), float64(v), float64(v), 0), h, w, gocv.MatTypeCV8UC3)
	return &capture.Frame{Source: "test", Mat: m}
}

// engines lists the engines a test runs on: OpenCV always, ONNX Runtime
// when its library is present.
func engines(t *testing.T) []Engine {
	p := os.Getenv(ORTLibEnv)
	if p == "" {
		p = filepath.Join("../..", ortCachePath)
	}
	if _, err := os.Stat(p); err != nil {
		t.Logf("ONNX Runtime library absent (%v): OpenCV engine only", err)
		return []Engine{EngineOpenCV}
	}
	return []Engine{EngineORT, EngineOpenCV}
}
