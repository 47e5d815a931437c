#ifndef TALLYD_MOG2_H
#define TALLYD_MOG2_H
#ifdef __cplusplus
extern "C" {
#endif

typedef void* TallydMOG2;

TallydMOG2 tallyd_mog2_new(int history, double var_threshold, int detect_shadows);
void tallyd_mog2_apply(TallydMOG2 b, void* src, void* dst, double learning_rate);
void tallyd_mog2_close(TallydMOG2 b);

#ifdef __cplusplus
}
#endif
#endif
