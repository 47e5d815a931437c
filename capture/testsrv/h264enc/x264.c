#include "x264.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <libavcodec/avcodec.h>
#include <libavutil/error.h>
#include <libavutil/frame.h>
#include <libavutil/opt.h>
#include <libswscale/swscale.h>

struct tallyd_x264 {
    AVCodecContext *ctx;
    AVFrame *frame;
    AVPacket *pkt;
    struct SwsContext *sws;
};

static char *message(const char *what, int code) {
    char buf[256], av[AV_ERROR_MAX_STRING_SIZE] = {0};
    if (code < 0) {
        av_strerror(code, av, sizeof av);
        snprintf(buf, sizeof buf, "%s: %s", what, av);
    } else {
        snprintf(buf, sizeof buf, "%s", what);
    }
    return strdup(buf);
}

void tallyd_x264_close(tallyd_x264 *e) {
    if (!e) return;
    avcodec_free_context(&e->ctx);
    av_frame_free(&e->frame);
    av_packet_free(&e->pkt);
    sws_freeContext(e->sws);
    free(e);
}

tallyd_x264 *tallyd_x264_open(int width, int height, int fps_num, int fps_den, int gop,
                              const char *preset, int crf, char **err) {
    const AVCodec *codec = avcodec_find_encoder_by_name("libx264");
    if (!codec) {
        *err = message("libavcodec has no libx264 encoder", 0);
        return NULL;
    }
    tallyd_x264 *e = calloc(1, sizeof *e);
    if (!e) {
        *err = message("out of memory", 0);
        return NULL;
    }
    e->ctx = avcodec_alloc_context3(codec);
    e->frame = av_frame_alloc();
    e->pkt = av_packet_alloc();
    if (!e->ctx || !e->frame || !e->pkt) {
        tallyd_x264_close(e);
        *err = message("out of memory", 0);
        return NULL;
    }
    AVCodecContext *c = e->ctx;
    c->width = width;
    c->height = height;
    c->pix_fmt = AV_PIX_FMT_YUV420P;
    c->time_base = (AVRational){fps_den, fps_num};
    c->framerate = (AVRational){fps_num, fps_den};
    c->gop_size = gop;
    c->keyint_min = gop;
    c->max_b_frames = 0;
    c->thread_count = 1;
    char crfs[16];
    snprintf(crfs, sizeof crfs, "%d", crf);
    int rc;
    if ((rc = av_opt_set(c->priv_data, "preset", preset, 0)) < 0 ||
        (rc = av_opt_set(c->priv_data, "crf", crfs, 0)) < 0 ||
        (rc = av_opt_set(c->priv_data, "x264-params", "scenecut=0:log=-1", 0)) < 0) {
        tallyd_x264_close(e);
        *err = message("set libx264 option", rc);
        return NULL;
    }
    if ((rc = avcodec_open2(c, codec, NULL)) < 0) {
        tallyd_x264_close(e);
        *err = message("open libx264", rc);
        return NULL;
    }
    e->frame->format = c->pix_fmt;
    e->frame->width = width;
    e->frame->height = height;
    if ((rc = av_frame_get_buffer(e->frame, 0)) < 0) {
        tallyd_x264_close(e);
        *err = message("allocate picture", rc);
        return NULL;
    }
    e->sws = sws_getContext(width, height, AV_PIX_FMT_BGR24, width, height, AV_PIX_FMT_YUV420P,
                            SWS_BILINEAR, NULL, NULL, NULL);
    if (!e->sws) {
        tallyd_x264_close(e);
        *err = message("no BGR to YUV 4:2:0 conversion", 0);
        return NULL;
    }
    return e;
}

int tallyd_x264_send(tallyd_x264 *e, const uint8_t *bgr, int stride, int64_t pts, char **err) {
    int rc;
    if (!bgr) {
        rc = avcodec_send_frame(e->ctx, NULL);
    } else {
        if ((rc = av_frame_make_writable(e->frame)) < 0) {
            *err = message("picture not writable", rc);
            return -1;
        }
        const uint8_t *src[1] = {bgr};
        int srcStride[1] = {stride};
        sws_scale(e->sws, src, srcStride, 0, e->ctx->height, e->frame->data, e->frame->linesize);
        e->frame->pts = pts;
        rc = avcodec_send_frame(e->ctx, e->frame);
    }
    if (rc < 0) {
        *err = message("encode", rc);
        return -1;
    }
    return 0;
}

int tallyd_x264_receive(tallyd_x264 *e, const uint8_t **data, int *size, int64_t *pts, int *key, char **err) {
    av_packet_unref(e->pkt);
    int rc = avcodec_receive_packet(e->ctx, e->pkt);
    if (rc == AVERROR(EAGAIN) || rc == AVERROR_EOF) return 0;
    if (rc < 0) {
        *err = message("encode", rc);
        return -1;
    }
    *data = e->pkt->data;
    *size = e->pkt->size;
    *pts = e->pkt->pts;
    *key = (e->pkt->flags & AV_PKT_FLAG_KEY) != 0;
    return 1;
}
