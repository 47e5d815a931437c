package capture

import (
	"bytes"
	"encoding/json"
	"log/slog"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// avlogChildEnv makes TestFFmpegLogRouted run as the child process that
// reads the corrupt file: "routed:<path>" or "raw:<path>".
const avlogChildEnv = "TALLYD_TEST_AVLOG_CHILD"

// corruptAVI writes a Motion-JPEG AVI and overwrites 64 bytes of every 4 KiB
// in the middle of it, so that FFmpeg's decoder complains about many frames.
func corruptAVI(t *testing.T) string {
	t.Helper()
	data, err := os.ReadFile(writeAVI(t, "good.avi", 160, 120, 40))
	if err != nil {
		t.Fatal(err)
	}
	for i := len(data) * 3 / 10; i < len(data)*7/10; i += 4096 {
		for j := 0; j < 64 && i+j < len(data); j++ {
			data[i+j] = byte(j*37 + 11)
		}
	}
	path := filepath.Join(t.TempDir(), "corrupt.avi")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestFFmpegLogRouted reads a corrupt file in a child process whose stderr
// the test keeps. Left alone (the control run), FFmpeg prints its decoding
// errors to stderr as "[mjpeg @ 0x...] ..." lines. Routed, none reaches
// stderr: the logger gets them summed, each line with its count, and the
// counts add up to the total.
func TestFFmpegLogRouted(t *testing.T) {
	if mode := os.Getenv(avlogChildEnv); mode != "" {
		avlogChild(t, mode)
		return
	}
	path := corruptAVI(t)
	run := func(mode string) (stdout, stderr string) {
		cmd := exec.Command(os.Args[0], "-test.run=^TestFFmpegLogRouted$", "-test.count=1")
		cmd.Env = append(os.Environ(), avlogChildEnv+"="+mode+":"+path)
		var out, errOut bytes.Buffer
		cmd.Stdout, cmd.Stderr = &out, &errOut
		if err := cmd.Run(); err != nil {
			t.Fatalf("%s child: %v\nstdout:\n%s\nstderr:\n%s", mode, err, &out, &errOut)
		}
		return out.String(), errOut.String()
	}

	_, raw := run("raw")
	if !strings.Contains(raw, "[mjpeg @ 0x") {
		t.Fatalf("control run: FFmpeg printed no mjpeg lines to stderr, so the file provokes nothing:\n%s", raw)
	}

	out, stderr := run("routed")
	if strings.Contains(stderr, " @ 0x") {
		t.Errorf("FFmpeg lines reached stderr:\n%s", stderr)
	}
	type line struct {
		Msg   string `json:"msg"`
		Count int64  `json:"count"`
		Total int64  `json:"total"`
		Err   string `json:"err"`
	}
	var lines []line
	for _, s := range strings.Split(out, "\n") {
		var l line
		if strings.HasPrefix(s, "{") && json.Unmarshal([]byte(s), &l) == nil && l.Msg == "ffmpeg reported a problem" {
			lines = append(lines, l)
		}
	}
	if len(lines) == 0 {
		t.Fatalf("no ffmpeg lines logged:\n%s", out)
	}
	var sum int64
	for _, l := range lines {
		sum += l.Count
	}
	last := lines[len(lines)-1]
	if sum != last.Total || last.Total < 2 || len(lines) > 3 {
		t.Errorf("%d lines whose counts sum to %d, last total %d; want few lines summing to the total:\n%s", len(lines), sum, last.Total, out)
	}
	msg, ok := strings.CutPrefix(last.Err, "mjpeg: ")
	if !ok || !strings.Contains(raw, "] "+msg+"\n") {
		t.Errorf("last line %q is not one FFmpeg printed in the control run", last.Err)
	}
}

func avlogChild(t *testing.T, mode string) {
	how, path, _ := strings.Cut(mode, ":")
	if how == "raw" {
		avlog.off = true
	} else {
		SetFFmpegLogger(slog.New(slog.NewJSONHandler(os.Stdout, &slog.HandlerOptions{Level: slog.LevelDebug})))
	}
	rd, _, err := Open(SourceSpec{ID: "bad", File: path}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if n, _ := readAll(rd); n == 0 {
		t.Error("read no frame of the corrupt file")
	}
	if err := rd.Close(); err != nil {
		t.Fatal(err)
	}
}

func TestParseAVLine(t *testing.T) {
	for _, tt := range []struct{ in, from, msg string }{
		{"[mjpeg @ 0x55d5c3a0c2c0] error count: 64\n", "mjpeg", "error count: 64"},
		{"[rtsp @ 0x1f] [tcp @ 0xA0] Connection to tcp://cam:554 failed: Connection refused", "rtsp/tcp", "Connection to tcp://cam:554 failed: Connection refused"},
		{"no prefix\tat all\x1b[0m", "", "no prefix at all [0m"},
		{"[rtsp @ 0x1] cannot open rtsp://counter:" + secret + "@cam:554/live and http://u@h/", "rtsp",
			"cannot open rtsp://xxxxx@cam:554/live and http://xxxxx@h/"},
	} {
		if from, msg := parseAVLine(tt.in); from != tt.from || msg != tt.msg {
			t.Errorf("parseAVLine(%q) = %q, %q", tt.in, from, msg)
		}
	}
}
