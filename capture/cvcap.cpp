// A thin shim over cv::VideoCapture that passes open-time parameters (the
// FFmpeg backend's open and read timeouts), which gocv v0.31 does not, and
// turns every C++ exception into an error message instead of an abort.
#include <cstring>
#include <stdexcept>
#include <vector>
#include <opencv2/core.hpp>
#include <opencv2/videoio.hpp>
#include "cvcap.h"

static_assert(int(TALLYD_CAP_PROP_OPEN_TIMEOUT_MSEC) == int(cv::CAP_PROP_OPEN_TIMEOUT_MSEC), "open timeout property");
static_assert(int(TALLYD_CAP_PROP_READ_TIMEOUT_MSEC) == int(cv::CAP_PROP_READ_TIMEOUT_MSEC), "read timeout property");

static void set_err(char** err, const char* msg) {
    if (err) *err = strdup(msg);
}

// guard runs f, returning fail with *err set when it throws.
template <typename T, typename F>
static T guard(char** err, T fail, F f) {
    try {
        return f();
    } catch (const std::exception& e) {
        set_err(err, e.what());
    } catch (...) {
        set_err(err, "unknown C++ exception");
    }
    return fail;
}

static cv::VideoCapture* handle(TallydCapture c) {
    if (!c) throw std::invalid_argument("no capture (closed or never opened)");
    return static_cast<cv::VideoCapture*>(c);
}

// open runs o on a new capture and keeps it when it opened.
template <typename O>
static TallydCapture open(char** err, O o) {
    cv::VideoCapture* c = new cv::VideoCapture();
    TallydCapture p = guard<TallydCapture>(err, nullptr, [&]() -> TallydCapture {
        o(c);
        return c->isOpened() ? c : nullptr;
    });
    if (!p) delete c;
    return p;
}

TallydCapture tallyd_cap_open_name(const char* name, int api, const int* params, int n_params, char** err) {
    std::vector<int> ps(params, params + (n_params > 0 ? n_params : 0));
    return open(err, [&](cv::VideoCapture* c) { c->open(cv::String(name), api, ps); });
}

TallydCapture tallyd_cap_open_index(int index, int api, char** err) {
    return open(err, [&](cv::VideoCapture* c) { c->open(index, api); });
}

int tallyd_cap_read(TallydCapture c, void* dst, char** err) {
    return guard(err, -1, [&]() { return handle(c)->read(*static_cast<cv::Mat*>(dst)) ? 1 : 0; });
}

int tallyd_cap_get(TallydCapture c, int prop, double* out, char** err) {
    return guard(err, -1, [&]() {
        *out = handle(c)->get(prop);
        return 0;
    });
}

int tallyd_cap_close(TallydCapture c, char** err) {
    int rc = guard(err, -1, [&]() {
        handle(c)->release();
        return 0;
    });
    delete static_cast<cv::VideoCapture*>(c);
    return rc;
}
