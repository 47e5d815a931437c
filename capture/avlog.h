#ifndef TALLYD_AVLOG_H
#define TALLYD_AVLOG_H

/* tallyd_avlog_install makes FFmpeg (libavutil's av_log) hand every complete
   line at warning level or worse to the Go function tallydFFmpegLine instead
   of printing it to stderr. It finds libavutil's functions in the process
   (OpenCV's FFmpeg backend loaded the library), so no FFmpeg headers or
   extra library are needed. Returns 1, or 0 when libavutil is not loaded.
   Not safe to call concurrently with itself. */
int tallyd_avlog_install(void);

#endif
