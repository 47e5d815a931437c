#ifndef TALLYD_CVDNN_H
#define TALLYD_CVDNN_H
#ifdef __cplusplus
extern "C" {
#endif

typedef void* TallydDNN;

/* Opens an ONNX model (weights NULL or empty) or a Darknet cfg with its
   weights file with OpenCV's DNN module. On failure returns NULL and sets
   *err to a malloc'd message the caller frees. */
TallydDNN tallyd_dnn_open(const char* path, const char* weights, const char** out_names, int n_out, char** err);

/* Runs the network on n images of c x h x w float32 values stored back to
   back. The outputs stay inside the network until the next forward or close.
   Returns 0, or -1 with *err set (malloc'd). */
int tallyd_dnn_forward(TallydDNN net, float* input, int n, int c, int h, int w, const char* input_name, char** err);

/* Output i of the last forward: its data, its dimensions (up to 8) and their
   count. Returns -1 when i is out of range or the output is not float32. */
int tallyd_dnn_output(TallydDNN net, int i, float** data, int* dims, int* ndims);

void tallyd_dnn_close(TallydDNN net);

/* The OpenCV version the module was built with, e.g. "4.6.0". */
const char* tallyd_dnn_version(void);

#ifdef __cplusplus
}
#endif
#endif
