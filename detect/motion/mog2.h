#ifndef TALLYD_MOG2_H
#define TALLYD_MOG2_H
#ifdef __cplusplus
extern "C" {
#endif

typedef void* TallydMOG2;

/* Every function catches the C++ exceptions OpenCV throws: it then sets *err
   to a malloc'd message the caller frees and returns NULL or -1. */

TallydMOG2 tallyd_mog2_new(int history, double var_threshold, int detect_shadows, char** err);
/* Updates the model with src (a cv::Mat*) and writes the foreground mask to
   dst (a cv::Mat*): 0, or -1 on an error. */
int tallyd_mog2_apply(TallydMOG2 b, void* src, void* dst, double learning_rate, char** err);
/* Releases the model and frees it: 0, or -1 when releasing threw (it is
   freed either way). */
int tallyd_mog2_close(TallydMOG2 b, char** err);

#ifdef __cplusplus
}
#endif
#endif
