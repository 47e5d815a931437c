package capture

import (
	"errors"
	"strings"
	"testing"
	"time"

	"tallyd/capture/testsrv"
)

const secret = "s3cr3t-Pa55" // must never appear in an error or a log line

// TestOpenBadInput opens sources that cannot work and checks that each error
// names the source, says what is wrong and hides the password.
func TestOpenBadInput(t *testing.T) {
	sc := testScene(t)
	auth := testsrv.StartRTSP(t, testsrv.RTSPOptions{Frames: testsrv.SceneFrames(sc, 80), Username: "counter", Password: secret})
	httpAuth := testsrv.StartMJPEG(t, testsrv.MJPEGOptions{Frames: testsrv.SceneFrames(sc, 80), Username: "counter", Password: secret})
	page := testsrv.StartPage(t, "text/html; charset=utf-8", "<html><body>camera login</body></html>")
	closed := testsrv.ClosedAddr(t)
	silent := testsrv.StartSilent(t)
	empty := t.TempDir()

	short := time.Second
	tests := []struct {
		name string
		spec SourceSpec
		is   error
		want string
	}{
		{"unreachable rtsp", SourceSpec{ID: "gate", URL: "rtsp://" + closed + "/live", Username: "counter", Password: secret},
			ErrUnreachable, "source gate: open rtsp://counter:xxxxx@" + closed + "/live: cannot connect to " + closed + ": connection refused"},
		{"unreachable http", SourceSpec{ID: "gate", URL: "http://counter:" + secret + "@" + closed + "/video.mjpg"},
			ErrUnreachable, "source gate: open http://counter:xxxxx@" + closed + "/video.mjpg: cannot connect to " + closed + ": connection refused"},
		{"wrong rtsp password", SourceSpec{ID: "gate", URL: auth.URL(), Username: "counter", Password: "wrong-" + secret},
			ErrUnauthorized, "source gate: open rtsp://counter:xxxxx@" + auth.Addr() + "/live: the server refused the credentials (RTSP 401 Unauthorized)"},
		{"rtsp without credentials", SourceSpec{ID: "gate", URL: auth.URL()},
			ErrUnauthorized, "source gate: open " + auth.URL() + ": the server requires credentials (RTSP 401 Unauthorized); set username and password"},
		{"wrong rtsp path", SourceSpec{ID: "gate", URL: "rtsp://" + auth.Addr() + "/other", Username: "counter", Password: secret},
			ErrNotFound, "source gate: open rtsp://counter:xxxxx@" + auth.Addr() + "/other: the server has no stream at /other (RTSP 404 Not Found)"},
		{"wrong http password", SourceSpec{ID: "gate", URL: httpAuth.URLWithAuth("counter", "wrong-"+secret)},
			ErrUnauthorized, "source gate: open http://counter:xxxxx@" + httpAuth.Addr() + "/video.mjpg: the server refused the credentials (HTTP 401 Unauthorized)"},
		{"web page", SourceSpec{ID: "gate", URL: page + "/index.html"},
			ErrNotVideo, "source gate: open " + page + "/index.html: the server sent text/html, not a video stream"},
		{"silent server", SourceSpec{ID: "gate", URL: "rtsp://" + silent + "/live", OpenTimeout: short},
			ErrTimeout, "source gate: open rtsp://" + silent + "/live: the server accepted the connection but sent nothing within open_timeout 1s"},
		{"silent http server", SourceSpec{ID: "gate", URL: "http://" + silent + "/video.mjpg", OpenTimeout: short},
			ErrTimeout, "source gate: open http://" + silent + "/video.mjpg: the server accepted the connection but sent nothing within open_timeout 1s"},
		{"unsupported scheme", SourceSpec{ID: "gate", URL: "ftp://" + closed + "/cam"},
			ErrUnsupported, "source gate: open ftp://" + closed + "/cam: unsupported URL scheme \"ftp\" (want rtsp, rtsps, http or https)"},
		{"missing device path", SourceSpec{ID: "desk", Device: "/dev/video-tallyd-absent"},
			ErrNoDevice, "source desk: open /dev/video-tallyd-absent: no such device /dev/video-tallyd-absent"},
		{"missing device index", SourceSpec{ID: "desk", Device: "987"},
			ErrNoDevice, "source desk: open device 987: no such device /dev/video987"},
		{"empty folder", SourceSpec{ID: "stills", Folder: empty},
			ErrEmptyFolder, "source stills: open " + empty + ": no .jpg, .jpeg, .png or .bmp images in the folder"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			t.Parallel() // the silent servers take the open timeout each
			start := time.Now()
			rd, _, err := Open(tt.spec, nil)
			if err == nil {
				_ = rd.Close()
				t.Fatal("opened; want an error")
			}
			if took := time.Since(start); took > 3*max(tt.spec.OpenTimeout, time.Second)+2*time.Second {
				t.Errorf("took %v", took)
			}
			if !errors.Is(err, tt.is) {
				t.Errorf("error does not match %v: %v", tt.is, err)
			}
			var se *SourceError
			if !errors.As(err, &se) || se.Source != tt.spec.ID {
				t.Errorf("not a *SourceError naming %q: %#v", tt.spec.ID, err)
			}
			if err.Error() != tt.want {
				t.Errorf("error\n got: %s\nwant: %s", err, tt.want)
			}
			if strings.Contains(err.Error(), secret) {
				t.Errorf("password in error: %s", err)
			}
		})
	}
}
