#ifndef TALLYD_CVCAP_H
#define TALLYD_CVCAP_H
#ifdef __cplusplus
extern "C" {
#endif

typedef void* TallydCapture;

// tallyd_cap_open_name opens a file, URL or device path with one backend.
// Timeouts (ms, 0 = backend default) are passed as open-time parameters, which
// only the FFmpeg backend accepts. Returns NULL when the source did not open.
TallydCapture tallyd_cap_open_name(const char* name, int api, int open_ms, int read_ms);
// tallyd_cap_open_index opens a local camera by index with one backend.
TallydCapture tallyd_cap_open_index(int index, int api);
// tallyd_cap_read decodes the next frame into dst (a cv::Mat*); 1 on success.
int tallyd_cap_read(TallydCapture c, void* dst);
double tallyd_cap_get(TallydCapture c, int prop);
void tallyd_cap_close(TallydCapture c);

#ifdef __cplusplus
}
#endif
#endif
