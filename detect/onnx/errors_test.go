package onnx

import (
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
)

// TestSetupErrors checks each start-up error exactly: it names the setting,
// the file and what was expected.
func TestSetupErrors(t *testing.T) {
	twoNames := filepath.Join(t.TempDir(), "two.names")
	if err := os.WriteFile(twoNames, []byte("person\ncar\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	rowsObj := fixture("rows-obj.onnx")
	tests := []struct {
		name   string
		mutate func(*Config)
		kind   error
		want   string
	}{
		{"missing model", func(c *Config) { c.Model = fixture("absent.onnx") }, ErrModel,
			`model: cannot open "../../testdata/onnx/absent.onnx": no such file or directory`},
		{"not ONNX", func(c *Config) { c.Model = fixture("not-onnx.onnx") }, ErrModel,
			`model: "../../testdata/onnx/not-onnx.onnx" is not an ONNX model: truncated length-delimited field (want a protobuf ModelProto with a graph)`},
		{"input of rank 3", func(c *Config) { c.Model = fixture("bad-rank3.onnx") }, ErrModel,
			`model: "../../testdata/onnx/bad-rank3.onnx": input images [1,3,64] has rank 3, want rank 4 [batch,3,height,width]`},
		{"unsupported layout", func(c *Config) { c.Model = fixture("bad-layout.onnx") }, ErrModel,
			`layout: "../../testdata/onnx/bad-layout.onnx": output shapes output [batch,10] fit none of the supported layouts: ` + layoutHelp},
		{"layout that does not fit", func(c *Config) { c.Model = fixture("e2e.onnx"); c.Layout = LayoutRowsNoObjCHW }, ErrModel,
			`layout: "../../testdata/onnx/e2e.onnx": output shapes output [batch,4,6] do not fit layout rows-noobj-chw: want 4+C >= 5 channels first, found 4 (supported: ` + layoutHelp + ")"},
		{"dynamic input without a size", func(c *Config) { c.Model = rowsObj }, ErrSetting,
			`input: "../../testdata/onnx/rows-obj.onnx": input images [batch,3,height,width] has a dynamic size; set input.width and input.height`},
		{"fixed input resized", func(c *Config) { c.Model = fixture("e2e.onnx"); c.Width, c.Height = 32, 32 }, ErrSetting,
			`input: "../../testdata/onnx/e2e.onnx": input images [batch,3,48,64] is fixed at 64x48 (found input 32x32)`},
		{"names for another model", func(c *Config) { c.Model = rowsObj; c.Width, c.Height = 64, 48; c.Names = twoNames }, ErrModel,
			`layout: "../../testdata/onnx/rows-obj.onnx": output shapes output [batch,10,8] read as layout rows-obj give 3 classes, but 2 class names are known; set layout or check the names`},
		{"unknown class", func(c *Config) { c.Model = fixture("e2e.onnx"); c.Classes = []string{"person", "cat"} }, ErrSetting,
			`classes[1]: no class "cat" in the model metadata names`},
		{"unknown class threshold", func(c *Config) {
			c.Model = fixture("boxes-scores.onnx")
			c.Names = fixture("fixture.names")
			c.ClassThresholds = map[string]float64{"horse": 0.5}
		}, ErrSetting, `class_thresholds.horse: no class "horse" in "../../testdata/onnx/fixture.names"`},
		{"missing names file", func(c *Config) { c.Model = fixture("e2e.onnx"); c.Names = fixture("absent.names") }, ErrSetting,
			`names: cannot read class names "../../testdata/onnx/absent.names": no such file or directory`},
		{"ONNX Runtime library missing", func(c *Config) { c.Model = fixture("e2e.onnx"); c.Library = "/nonexistent/libonnxruntime.so.1" }, ErrLibrary,
			`library: cannot open ONNX Runtime library "/nonexistent/libonnxruntime.so.1" (from detector.onnx.library): no such file or directory; want libonnxruntime.so.1 version 1.24.1 (run make setup)`},
		{"ONNX Runtime library of the wrong version", func(c *Config) { c.Model = fixture("e2e.onnx"); c.Library = fakeORT(t) }, ErrLibrary,
			`library: "` + fakeORT(t) + `" (from detector.onnx.library): is ONNX Runtime 1.16.3, want 1.24.1 (C API 24)`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			cfg := Defaults()
			cfg.Engine = EngineORT
			cfg.Library = "/nonexistent/libonnxruntime.so.1" // every check before the engine must fire first
			tt.mutate(&cfg)
			d, err := New(cfg)
			if err == nil {
				_ = d.Close()
				t.Fatalf("no error, want %q", tt.want)
			}
			if !errors.Is(err, tt.kind) {
				t.Errorf("error does not wrap %v: %v", tt.kind, err)
			}
			if err.Error() != tt.want {
				t.Errorf("error\n got: %s\nwant: %s", err, tt.want)
			}
		})
	}
}

// fakeORT builds testdata/onnx/fakeort.c into a shared library that looks
// like ONNX Runtime 1.16.3 (no C API 24), once per test binary.
var (
	fakeOnce sync.Once
	fakePath string
	fakeErr  error
)

func fakeORT(t *testing.T) string {
	t.Helper()
	fakeOnce.Do(func() {
		cc := os.Getenv("CC")
		if cc == "" {
			out, err := exec.Command("go", "env", "CC").Output()
			if err != nil {
				fakeErr = err
				return
			}
			cc = strings.TrimSpace(string(out))
		}
		dir, err := os.MkdirTemp("", "tallyd-fakeort")
		if err != nil {
			fakeErr = err
			return
		}
		fakePath = filepath.Join(dir, "libfakeort.so")
		if out, err := exec.Command(cc, "-shared", "-fPIC", "-o", fakePath, fixture("fakeort.c")).CombinedOutput(); err != nil {
			fakeErr = errors.New(string(out))
		}
	})
	if fakeErr != nil {
		t.Skipf("cannot build the fake ONNX Runtime library: %v", fakeErr)
	}
	return fakePath
}

func TestLibraryNotALibrary(t *testing.T) {
	cfg := Defaults()
	cfg.Model, cfg.Library = fixture("e2e.onnx"), fixture("not-onnx.onnx")
	_, err := New(cfg)
	want := `library: "../../testdata/onnx/not-onnx.onnx" (from detector.onnx.library): cannot load it as a shared library (`
	if !errors.Is(err, ErrLibrary) || !strings.HasPrefix(err.Error(), want) || !strings.HasSuffix(err.Error(), "); want ONNX Runtime 1.24.1") {
		t.Fatalf("err = %v\nwant %s...); want ONNX Runtime 1.24.1", err, want)
	}
}

// TestWrongLibraryAfterRightOne: once the right library runs, a detector
// configured with a wrong one still gets the version error, and a second
// detector on the right one starts (the environment is shared, never torn
// down).
func TestWrongLibraryAfterRightOne(t *testing.T) {
	cfg := testConfig(t, fixture("e2e.onnx"), EngineORT)
	d1 := mustNew(t, cfg)
	bad := cfg
	bad.Library = fakeORT(t)
	if _, err := New(bad); !errors.Is(err, ErrLibrary) || !strings.Contains(err.Error(), "is ONNX Runtime 1.16.3, want 1.24.1") {
		t.Fatalf("err = %v", err)
	}
	d2 := mustNew(t, cfg)
	if d1.Info().Engine != "ONNX Runtime 1.24.1" || d2.Info().Engine != d1.Info().Engine {
		t.Fatalf("engines %q, %q", d1.Info().Engine, d2.Info().Engine)
	}
}

func TestResolveLibrary(t *testing.T) {
	t.Setenv(ORTLibEnv, "")
	t.Chdir(t.TempDir())
	if p, from, err := ResolveLibrary("/opt/ort/libonnxruntime.so.1"); p != "/opt/ort/libonnxruntime.so.1" || from != "detector.onnx.library" || err != nil {
		t.Errorf("configured: %q %q %v", p, from, err)
	}
	_, _, err := ResolveLibrary("")
	if !errors.Is(err, ErrLibrary) || !strings.HasPrefix(err.Error(),
		`library: no ONNX Runtime 1.24.1 library found (looked for ".cache/onnxruntime/1.24.1/libonnxruntime.so.1", `) ||
		!strings.HasSuffix(err.Error(), "); run make setup, set TALLYD_ORT_LIB or detector.onnx.library") {
		t.Errorf("nothing found: %v", err)
	}
	if err := os.MkdirAll(filepath.Dir(ortCachePath), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(ortCachePath, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	if p, from, err := ResolveLibrary(""); p != ortCachePath || from != "the working directory" || err != nil {
		t.Errorf("cache in working directory: %q %q %v", p, from, err)
	}
	t.Setenv(ORTLibEnv, "/env/libonnxruntime.so.1")
	if p, from, err := ResolveLibrary(""); p != "/env/libonnxruntime.so.1" || from != ORTLibEnv || err != nil {
		t.Errorf("env: %q %q %v", p, from, err)
	}
}
