// A thin shim over cv::VideoCapture that passes open-time parameters (the
// FFmpeg backend's open and read timeouts), which gocv v0.31 does not.
#include <opencv2/opencv.hpp>
#include <opencv2/videoio.hpp>
#include <vector>
#include "cvcap.h"

static TallydCapture keep_if_open(cv::VideoCapture* c) {
    if (!c->isOpened()) {
        delete c;
        return nullptr;
    }
    return c;
}

TallydCapture tallyd_cap_open_name(const char* name, int api, int open_ms, int read_ms) {
    std::vector<int> params;
    if (open_ms > 0) {
        params.push_back(cv::CAP_PROP_OPEN_TIMEOUT_MSEC);
        params.push_back(open_ms);
    }
    if (read_ms > 0) {
        params.push_back(cv::CAP_PROP_READ_TIMEOUT_MSEC);
        params.push_back(read_ms);
    }
    cv::VideoCapture* c = new cv::VideoCapture();
    try {
        c->open(cv::String(name), api, params);
    } catch (const cv::Exception&) {
        delete c;
        return nullptr;
    }
    return keep_if_open(c);
}

TallydCapture tallyd_cap_open_index(int index, int api) {
    cv::VideoCapture* c = new cv::VideoCapture();
    try {
        c->open(index, api);
    } catch (const cv::Exception&) {
        delete c;
        return nullptr;
    }
    return keep_if_open(c);
}

int tallyd_cap_read(TallydCapture c, void* dst) {
    try {
        return static_cast<cv::VideoCapture*>(c)->read(*static_cast<cv::Mat*>(dst)) ? 1 : 0;
    } catch (const cv::Exception&) {
        return 0;
    }
}

double tallyd_cap_get(TallydCapture c, int prop) {
    return static_cast<cv::VideoCapture*>(c)->get(prop);
}

void tallyd_cap_close(TallydCapture c) {
    delete static_cast<cv::VideoCapture*>(c);
}
