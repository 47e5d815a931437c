// A thin shim over cv::BackgroundSubtractorMOG2 that exposes the learning
// rate, which gocv v0.31's wrapper does not pass through, and turns every
// C++ exception into an error message instead of an abort.
#include <cstring>
#include <stdexcept>
#include <opencv2/core.hpp>
#include <opencv2/video.hpp>
#include "mog2.h"

struct tallyd_mog2 {
    cv::Ptr<cv::BackgroundSubtractorMOG2> p;
};

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

static tallyd_mog2* handle(TallydMOG2 b) {
    if (!b) throw std::invalid_argument("no background model (closed or never made)");
    return static_cast<tallyd_mog2*>(b);
}

TallydMOG2 tallyd_mog2_new(int history, double var_threshold, int detect_shadows, char** err) {
    tallyd_mog2* h = new tallyd_mog2;
    TallydMOG2 p = guard<TallydMOG2>(err, nullptr, [&]() -> TallydMOG2 {
        h->p = cv::createBackgroundSubtractorMOG2(history, var_threshold, detect_shadows != 0);
        return h;
    });
    if (!p) delete h;
    return p;
}

int tallyd_mog2_apply(TallydMOG2 b, void* src, void* dst, double learning_rate, char** err) {
    return guard(err, -1, [&]() {
        handle(b)->p->apply(*static_cast<cv::Mat*>(src), *static_cast<cv::Mat*>(dst), learning_rate);
        return 0;
    });
}

int tallyd_mog2_close(TallydMOG2 b, char** err) {
    int rc = guard(err, -1, [&]() {
        handle(b)->p.release();
        return 0;
    });
    delete static_cast<tallyd_mog2*>(b);
    return rc;
}
