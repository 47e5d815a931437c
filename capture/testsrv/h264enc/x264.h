// A small C interface to libavcodec's libx264 encoder for the test servers:
// BGR pictures in, H.264 Annex-B access units out. Errors come back as
// messages the caller frees.
#ifndef TALLYD_X264_H
#define TALLYD_X264_H

#include <stdint.h>

typedef struct tallyd_x264 tallyd_x264;

// tallyd_x264_open starts an encoder: width x height at fps_num/fps_den,
// an IDR picture every gop pictures, no B-frames, one thread, libx264's
// preset and constant rate factor crf. NULL with *err set on failure.
tallyd_x264 *tallyd_x264_open(int width, int height, int fps_num, int fps_den, int gop,
                              const char *preset, int crf, char **err);

// tallyd_x264_send encodes one 8-bit BGR picture (rows stride bytes apart)
// with presentation index pts; bgr NULL starts the flush. 0 ok, -1 error.
int tallyd_x264_send(tallyd_x264 *e, const uint8_t *bgr, int stride, int64_t pts, char **err);

// tallyd_x264_receive takes the next coded picture: 1 with *data/*size/*pts
// set (valid until the next call), 0 when the encoder needs more input or
// is flushed, -1 on error.
int tallyd_x264_receive(tallyd_x264 *e, const uint8_t **data, int *size, int64_t *pts, int *key, char **err);

// tallyd_x264_close frees the encoder; NULL is allowed.
void tallyd_x264_close(tallyd_x264 *e);

#endif
