// A thin shim over cv::dnn::Net for ONNX and Darknet models. gocv v0.31 does not catch
// C++ exceptions, and OpenCV throws on models or inputs it cannot handle;
// here every call catches them and returns the message instead.
#include <cstdlib>
#include <cstring>
#include <string>
#include <vector>
#include <opencv2/core.hpp>
#include <opencv2/dnn.hpp>
#include "cvdnn.h"

struct tallyd_dnn {
    cv::dnn::Net net;
    std::vector<std::string> out_names;
    cv::Mat in;  // a copy of the input: OpenCV keeps a reference to it
    std::vector<cv::Mat> outs;
};

static void set_err(char** err, const char* msg) {
    if (err) *err = strdup(msg);
}

TallydDNN tallyd_dnn_open(const char* path, const char* weights, const char** out_names, int n_out, char** err) {
    tallyd_dnn* h = new tallyd_dnn;
    try {
        if (weights && weights[0]) {
            h->net = cv::dnn::readNetFromDarknet(path, weights);
        } else {
            h->net = cv::dnn::readNetFromONNX(path);
        }
        if (h->net.empty()) {
            delete h;
            set_err(err, "OpenCV read an empty network");
            return NULL;
        }
        h->net.setPreferableBackend(cv::dnn::DNN_BACKEND_OPENCV);
        h->net.setPreferableTarget(cv::dnn::DNN_TARGET_CPU);
        for (int i = 0; i < n_out; i++) h->out_names.push_back(out_names[i]);
        return h;
    } catch (const std::exception& e) {
        set_err(err, e.what());
    } catch (...) {
        set_err(err, "unknown C++ exception");
    }
    delete h;
    return NULL;
}

int tallyd_dnn_forward(TallydDNN p, float* input, int n, int c, int h, int w, const char* input_name, char** err) {
    tallyd_dnn* d = static_cast<tallyd_dnn*>(p);
    try {
        int sizes[4] = {n, c, h, w};
        cv::Mat(4, sizes, CV_32F, input).copyTo(d->in);
        d->net.setInput(d->in, input_name);
        d->outs.clear();
        d->net.forward(d->outs, d->out_names);
        return 0;
    } catch (const std::exception& e) {
        set_err(err, e.what());
    } catch (...) {
        set_err(err, "unknown C++ exception");
    }
    return -1;
}

int tallyd_dnn_output(TallydDNN p, int i, float** data, int* dims, int* ndims) {
    tallyd_dnn* d = static_cast<tallyd_dnn*>(p);
    if (i < 0 || i >= (int)d->outs.size()) return -1;
    cv::Mat& m = d->outs[i];
    if (m.depth() != CV_32F || !m.isContinuous() || m.dims > 8) return -1;
    *data = m.ptr<float>();
    *ndims = m.dims;
    for (int k = 0; k < m.dims; k++) dims[k] = m.size[k];
    return 0;
}

void tallyd_dnn_close(TallydDNN p) {
    delete static_cast<tallyd_dnn*>(p);
}

const char* tallyd_dnn_version(void) {
    return CV_VERSION;
}
