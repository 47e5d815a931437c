// Routes FFmpeg's log lines to Go (see avlog.h). The types and levels below
// are libavutil's public API (libavutil/log.h), declared here because the
// FFmpeg development headers are not installed.
#define _GNU_SOURCE
#include <dlfcn.h>
#include <stdarg.h>
#include <string.h>
#include "avlog.h"
#include "_cgo_export.h"

#define TALLYD_AV_LOG_WARNING 24

typedef void (*av_log_callback)(void* avcl, int level, const char* fmt, va_list vl);
typedef void (*av_log_set_callback_fn)(av_log_callback cb);
typedef void (*av_log_format_line_fn)(void* avcl, int level, const char* fmt, va_list vl,
                                      char* line, int line_size, int* print_prefix);

static av_log_set_callback_fn set_callback;
static av_log_format_line_fn format_line;

// FFmpeg logs from its decoding threads too, and one line may come in
// several calls: each thread builds its own line.
static __thread char line[1024];
static __thread int line_len;
static __thread int line_level;
static __thread int print_prefix = 1;

static void callback(void* avcl, int level, const char* fmt, va_list vl) {
    if (level > TALLYD_AV_LOG_WARNING) return;  // info, verbose, debug, trace
    char part[sizeof line];
    va_list copy;
    va_copy(copy, vl);
    format_line(avcl, level, fmt, copy, part, sizeof part, &print_prefix);
    va_end(copy);
    if (line_len == 0 || level < line_level) line_level = level;  // the worst part's level
    int n = (int)strlen(part);
    if (n > (int)sizeof line - 1 - line_len) n = (int)sizeof line - 1 - line_len;
    memcpy(line + line_len, part, n);
    line_len += n;
    if (print_prefix) {  // format_line sets it when the part ended the line
        tallydFFmpegLine(line_level, line, line_len);
        line_len = 0;
    }
}

int tallyd_avlog_install(void) {
    if (!set_callback) {
        format_line = (av_log_format_line_fn)dlsym(RTLD_DEFAULT, "av_log_format_line");
        set_callback = (av_log_set_callback_fn)dlsym(RTLD_DEFAULT, "av_log_set_callback");
        if (!format_line || !set_callback) {
            set_callback = NULL;
            return 0;
        }
    }
    set_callback(callback);
    return 1;
}
