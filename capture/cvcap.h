#ifndef TALLYD_CVCAP_H
#define TALLYD_CVCAP_H
#ifdef __cplusplus
extern "C" {
#endif

typedef void* TallydCapture;

/* Open-time properties (cv::VideoCaptureProperties) the Go side passes. */
enum {
    TALLYD_CAP_PROP_OPEN_TIMEOUT_MSEC = 53,
    TALLYD_CAP_PROP_READ_TIMEOUT_MSEC = 54
};

/* Every function catches the C++ exceptions OpenCV throws. On an exception it
   sets *err to a malloc'd message the caller frees and returns NULL or -1. */

/* Opens a file, URL or device path with one backend, passing n_params
   open-time parameters (property, value pairs). Returns NULL with *err left
   NULL when the backend could not open the source. */
TallydCapture tallyd_cap_open_name(const char* name, int api, const int* params, int n_params, char** err);
/* Opens a local camera by index with one backend; NULL as above. */
TallydCapture tallyd_cap_open_index(int index, int api, char** err);
/* Decodes the next frame into dst (a cv::Mat*): 1 when a frame was read, 0
   when there is none, -1 on an error. */
int tallyd_cap_read(TallydCapture c, void* dst, char** err);
/* Reads a property into *out: 0, or -1 on an error. */
int tallyd_cap_get(TallydCapture c, int prop, double* out, char** err);
/* Releases the capture and frees it: 0, or -1 when releasing threw (the
   capture is freed either way). */
int tallyd_cap_close(TallydCapture c, char** err);

#ifdef __cplusplus
}
#endif
#endif
