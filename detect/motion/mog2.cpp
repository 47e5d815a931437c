// A thin shim over cv::BackgroundSubtractorMOG2 that exposes the learning
// rate, which gocv v0.31's wrapper does not pass through.
#include <opencv2/opencv.hpp>
#include <opencv2/video.hpp>
#include "mog2.h"

struct tallyd_mog2 {
    cv::Ptr<cv::BackgroundSubtractorMOG2> p;
};

TallydMOG2 tallyd_mog2_new(int history, double var_threshold, int detect_shadows) {
    tallyd_mog2* h = new tallyd_mog2;
    h->p = cv::createBackgroundSubtractorMOG2(history, var_threshold, detect_shadows != 0);
    return h;
}

void tallyd_mog2_apply(TallydMOG2 b, void* src, void* dst, double learning_rate) {
    tallyd_mog2* h = static_cast<tallyd_mog2*>(b);
    h->p->apply(*static_cast<cv::Mat*>(src), *static_cast<cv::Mat*>(dst), learning_rate);
}

void tallyd_mog2_close(TallydMOG2 b) {
    delete static_cast<tallyd_mog2*>(b);
}
