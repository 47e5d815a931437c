package onnx

/*
#cgo LDFLAGS: -ldl
#include <dlfcn.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

// The first two members of OrtApiBase (onnxruntime_c_api.h): enough to ask a
// library its version without creating any ONNX Runtime state.
typedef struct {
	const void* (*GetApi)(uint32_t version);
	const char* (*GetVersionString)(void);
} tallyd_ort_api_base;

typedef const tallyd_ort_api_base* (*tallyd_get_api_base)(void);

// tallyd_ort_probe loads the library at path and reports its version and
// whether it provides C API api_version. Returns 0 on success; otherwise 1
// (not loadable) or 2 (no OrtGetApiBase) with *err set (malloc'd).
static int tallyd_ort_probe(const char* path, uint32_t api_version, char** version, int* has_api, char** err) {
	void* h = dlopen(path, RTLD_NOW | RTLD_LOCAL);
	if (!h) {
		const char* e = dlerror();
		*err = strdup(e ? e : "dlopen failed");
		return 1;
	}
	tallyd_get_api_base fn = (tallyd_get_api_base) dlsym(h, "OrtGetApiBase");
	if (!fn) {
		*err = strdup("the library has no OrtGetApiBase symbol");
		dlclose(h);
		return 2;
	}
	const tallyd_ort_api_base* base = fn();
	const char* v = base && base->GetVersionString ? base->GetVersionString() : NULL;
	*version = strdup(v ? v : "");
	*has_api = base && base->GetApi && base->GetApi(api_version) != NULL;
	// The handle stays open: the library is about to be used anyway, and
	// unloading a runtime that may start threads is not worth the risk.
	return 0;
}
*/
import "C"

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"unsafe"

	ort "github.com/yalue/onnxruntime_go"
)

// ORT library version this build speaks (onnxruntime_go v1.27.0 uses the C
// API version 24, first shipped with ONNX Runtime 1.24).
const (
	ORTVersion    = "1.24.1"
	ortAPIVersion = 24
	// ORTLibEnv names an ONNX Runtime library to use instead of the
	// project's cached copy.
	ORTLibEnv = "TALLYD_ORT_LIB"
)

// ortCachePath is where `make setup` puts the library, relative to the
// repository root.
var ortCachePath = filepath.Join(".cache", "onnxruntime", ORTVersion, "libonnxruntime.so.1")

// ResolveLibrary finds the ONNX Runtime shared library: the configured path
// if any, else $TALLYD_ORT_LIB, else .cache/onnxruntime/1.24.1/libonnxruntime.so.1
// relative to the working directory, then to the parent of the executable's
// folder (bin/tallyd in a checkout), then lib/tallyd beside the executable's
// folder (make install). It returns the path and where it came
// from, or an error listing every place tried.
func ResolveLibrary(configured string) (path, from string, err error) {
	if configured != "" {
		return configured, "detector.onnx.library", nil
	}
	if env := os.Getenv(ORTLibEnv); env != "" {
		return env, ORTLibEnv, nil
	}
	tried := []string{ortCachePath}
	if _, err := os.Stat(ortCachePath); err == nil {
		return ortCachePath, "the working directory", nil
	}
	if exe, err := os.Executable(); err == nil {
		p := filepath.Join(filepath.Dir(filepath.Dir(exe)), ortCachePath)
		tried = append(tried, p)
		if _, err := os.Stat(p); err == nil {
			return p, "the executable's folder", nil
		}
		// make install: PREFIX/bin/tallyd and PREFIX/lib/tallyd/.
		p = filepath.Join(filepath.Dir(filepath.Dir(exe)), "lib", "tallyd", "libonnxruntime.so.1")
		tried = append(tried, p)
		if _, err := os.Stat(p); err == nil {
			return p, "the installed library folder", nil
		}
	}
	return "", "", libErr(fmt.Sprintf("no ONNX Runtime %s library found (looked for %s); run make setup, set %s or detector.onnx.library",
		ORTVersion, strings.Join(quoteAll(tried), ", "), ORTLibEnv))
}

func quoteAll(ss []string) []string {
	out := make([]string, len(ss))
	for i, s := range ss {
		out[i] = fmt.Sprintf("%q", s)
	}
	return out
}

// ortEnv is ONNX Runtime's process-wide environment. It is created once, on
// the first successful load, and never destroyed: sessions of any detector
// may use it until the process exits. A failed attempt leaves nothing
// behind, so a later detector (or a test) can try another library; that is
// why this is a mutex and a path rather than a sync.Once.
var ortEnv struct {
	mu      sync.Mutex
	path    string // library the environment runs on; "" until loaded
	version string
}

// loadORT makes sure ONNX Runtime's environment runs on the library at path,
// checking its version first.
func loadORT(path, from string) (version string, err error) {
	ortEnv.mu.Lock()
	defer ortEnv.mu.Unlock()
	st, err := os.Stat(path)
	if err != nil {
		return "", libErr(fmt.Sprintf("cannot open ONNX Runtime library %q (from %s): %v; want libonnxruntime.so.1 version %s (run make setup)",
			path, from, unwrapPathErr(err), ORTVersion))
	}
	if ortEnv.path != "" {
		if prev, err := os.Stat(ortEnv.path); err == nil && os.SameFile(prev, st) {
			return ortEnv.version, nil
		}
	}
	// Probe first, so that a wrong library is reported as such even when
	// another one is already loaded.
	version, err = probeORT(path)
	if err != nil {
		return "", libErr(fmt.Sprintf("%q (from %s): %v", path, from, err))
	}
	if ortEnv.path != "" {
		return "", libErr(fmt.Sprintf("ONNX Runtime is already loaded from %q in this process; cannot also load %q (from %s)",
			ortEnv.path, path, from))
	}
	ort.SetSharedLibraryPath(path)
	if err := ort.InitializeEnvironment(ort.WithLogLevelError()); err != nil {
		return "", libErr(fmt.Sprintf("%q (from %s): cannot start ONNX Runtime: %v", path, from, err))
	}
	ortEnv.path, ortEnv.version = path, version
	return version, nil
}

// probeORT loads the library and checks that it is ONNX Runtime 1.24.x with
// C API 24.
func probeORT(path string) (string, error) {
	cPath := C.CString(path)
	defer C.free(unsafe.Pointer(cPath))
	var cVer, cErr *C.char
	var hasAPI C.int
	if rc := C.tallyd_ort_probe(cPath, ortAPIVersion, &cVer, &hasAPI, &cErr); rc != 0 {
		msg := C.GoString(cErr)
		C.free(unsafe.Pointer(cErr))
		if rc == 1 {
			return "", fmt.Errorf("cannot load it as a shared library (%s); want ONNX Runtime %s", msg, ORTVersion)
		}
		return "", fmt.Errorf("not an ONNX Runtime library (%s); want ONNX Runtime %s", msg, ORTVersion)
	}
	version := C.GoString(cVer)
	C.free(unsafe.Pointer(cVer))
	if !strings.HasPrefix(version, "1.24.") || hasAPI == 0 {
		return "", fmt.Errorf("is ONNX Runtime %s, want %s (C API %d)", orUnknown(version), ORTVersion, ortAPIVersion)
	}
	return version, nil
}

func orUnknown(s string) string {
	if s == "" {
		return "of unknown version"
	}
	return s
}

func unwrapPathErr(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}
