/* A stand-in for an ONNX Runtime library of the wrong version, for the
   detector's start-up checks (detect/onnx errors_test.go compiles it with the
   C compiler cgo uses). It exports OrtGetApiBase like the real library
   (onnxruntime_c_api.h: OrtApiBase starts with GetApi, GetVersionString),
   reports version 1.16.3 and, like a library older than 1.24, has no C API
   version 24. */
#include <stddef.h>
#include <stdint.h>

typedef struct {
    const void* (*GetApi)(uint32_t version);
    const char* (*GetVersionString)(void);
} fake_api_base;

static const void* get_api(uint32_t version) { (void)version; return NULL; }
static const char* get_version(void) { return "1.16.3"; }
static const fake_api_base base = { get_api, get_version };

const fake_api_base* OrtGetApiBase(void) { return &base; }
