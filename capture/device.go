package capture

import (
	"errors"
	"fmt"
	"os"
	"runtime"
	"strconv"
)

// openDevice opens a local camera by index ("0") or path ("/dev/video0")
// through OpenCV's Video4Linux backend. OpenCV's open-time timeouts belong
// to the FFmpeg backend only; Video4Linux reads wait at most its own select
// timeout (OPENCV_VIDEOIO_V4L_SELECT_TIMEOUT, 10 s by default, from memory).
func openDevice(dev string, maxPixels int) (*Video, error) {
	path := dev
	if isIndex(dev) {
		path = "/dev/video" + dev
	}
	if runtime.GOOS == "linux" {
		if _, err := os.Stat(path); err != nil {
			if errors.Is(err, os.ErrNotExist) {
				return nil, reasonf(ErrNoDevice, "no such device %s", path)
			}
			return nil, fmt.Errorf("cannot use device %s: %w", path, unwrapPath(err))
		}
	}
	v, err := openVideo(func() (*cvCapture, error) {
		if n, err := strconv.Atoi(dev); err == nil && isIndex(dev) {
			return openCVIndex(n, apiV4L2)
		}
		return openCVName(dev, apiV4L2, nil)
	}, true, 0, maxPixels)
	switch err {
	case errNotReadable:
		return nil, fmt.Errorf("cannot open %s (busy, or not a video capture device)", path)
	case errNoFrame:
		return nil, fmt.Errorf("%s opened but delivered no frame", path)
	}
	return v, err
}

// isIndex reports whether s is a camera index: 1 to 3 decimal digits.
func isIndex(s string) bool {
	if len(s) == 0 || len(s) > 3 {
		return false
	}
	for i := 0; i < len(s); i++ {
		if !isDigit(s[i]) {
			return false
		}
	}
	return true
}

func unwrapPath(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}
