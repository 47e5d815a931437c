package capture

/*
#cgo LDFLAGS: -ldl
#include "avlog.h"
*/
import "C"

import (
	"context"
	"errors"
	"log/slog"
	"os"
	"regexp"
	"strings"
	"sync"

	"tallyd/internal/repeat"
)

// FFmpeg's log levels (libavutil/log.h).
const avLogError = 16

// SetFFmpegLogger sets the logger that receives FFmpeg's own log lines
// (OpenCV's FFmpeg backend lets libav* log connection and decoding problems,
// one line each). Lines at error level or worse are summed and logged at
// most once a second as "ffmpeg reported a problem", with their count and
// the last line; warnings likewise at debug level as "ffmpeg warning".
// FFmpeg then prints nothing to stderr itself. Until it is called, or with
// nil, the lines go to slog.Default() as it is when they are logged.
//
// When OPENCV_FFMPEG_DEBUG or OPENCV_FFMPEG_LOGLEVEL is set, OpenCV's own
// FFmpeg debug printing is left in place instead.
func SetFFmpegLogger(log *slog.Logger) {
	avlog.mu.Lock()
	defer avlog.mu.Unlock()
	avlog.errs.Flush()
	avlog.warns.Flush()
	avlog.setLocked(log)
}

// ffmpegLog routes and sums FFmpeg's log lines; one per process, as
// FFmpeg's logging is.
type ffmpegLog struct {
	mu          sync.Mutex
	off         bool // leave FFmpeg's logging alone (OpenCV's debug switches, tests)
	tried       bool
	errs, warns *repeat.Reporter
}

var avlog = func() *ffmpegLog {
	_, debug := os.LookupEnv("OPENCV_FFMPEG_DEBUG") // OpenCV looks only at whether they are set
	_, level := os.LookupEnv("OPENCV_FFMPEG_LOGLEVEL")
	l := &ffmpegLog{off: debug || level}
	l.setLocked(nil)
	return l
}()

func (l *ffmpegLog) setLocked(log *slog.Logger) {
	if log == nil {
		log = slog.New(defaultHandler{})
	}
	l.errs = repeat.New(log, "ffmpeg reported a problem", 0)
	l.warns = repeat.New(log, "ffmpeg warning", 0).AtLevel(slog.LevelDebug)
}

// routeFFmpegLog installs the callback that sends FFmpeg's lines to avlog.
// Opens call it before and after opening with the FFmpeg backend: OpenCV
// sets FFmpeg's log level at each open, and replaces the callback when its
// debug switches are set.
func routeFFmpegLog() {
	avlog.mu.Lock()
	defer avlog.mu.Unlock()
	if avlog.off {
		return
	}
	if C.tallyd_avlog_install() == 0 && !avlog.tried {
		slog.New(defaultHandler{}).Warn("cannot route FFmpeg's log lines: libavutil's av_log functions not found; they go to stderr")
	}
	avlog.tried = true
}

// flushFFmpegLog logs the FFmpeg lines summed since the last report.
func flushFFmpegLog() {
	avlog.mu.Lock()
	defer avlog.mu.Unlock()
	avlog.errs.Flush()
	avlog.warns.Flush()
}

// avPrefix is FFmpeg's line prefix naming the context that logs, e.g.
// "[mjpeg @ 0x55d5c3a0] ".
var avPrefix = regexp.MustCompile(`^\[([^\]]*?) @ 0x[0-9a-fA-F]+\] `)

// avUserinfo is the user:password part of a URL in an FFmpeg line.
var avUserinfo = regexp.MustCompile(`([a-zA-Z][a-zA-Z0-9+.-]*://)[^/@\s]*@`)

// parseAVLine splits an FFmpeg line into the names of the contexts that
// logged it ("mjpeg", or "rtsp/tcp") and the message, with control
// characters replaced and the credentials of any URL hidden.
func parseAVLine(s string) (from, msg string) {
	var names []string
	for {
		m := avPrefix.FindStringSubmatchIndex(s)
		if m == nil {
			break
		}
		names = append(names, s[m[2]:m[3]])
		s = s[m[1]:]
	}
	msg = strings.Map(func(r rune) rune {
		if r < ' ' || r == 0x7f {
			return ' '
		}
		return r
	}, strings.TrimSpace(s))
	msg = avUserinfo.ReplaceAllString(msg, "${1}xxxxx@")
	return strings.Join(names, "/"), msg
}

//export tallydFFmpegLine
func tallydFFmpegLine(level C.int, line *C.char, n C.int) {
	from, msg := parseAVLine(C.GoStringN(line, n))
	if from != "" {
		msg = from + ": " + msg
	}
	avlog.mu.Lock()
	r := avlog.warns
	if level <= avLogError {
		r = avlog.errs
	}
	avlog.mu.Unlock()
	r.Note(errors.New(msg))
}

// defaultHandler passes records to the handler of slog.Default() as it is
// when they are logged.
type defaultHandler struct{}

func (defaultHandler) Enabled(ctx context.Context, l slog.Level) bool {
	return slog.Default().Handler().Enabled(ctx, l)
}

func (defaultHandler) Handle(ctx context.Context, r slog.Record) error {
	return slog.Default().Handler().Handle(ctx, r)
}

func (defaultHandler) WithAttrs(as []slog.Attr) slog.Handler {
	return slog.Default().Handler().WithAttrs(as)
}

func (defaultHandler) WithGroup(name string) slog.Handler {
	return slog.Default().Handler().WithGroup(name)
}
