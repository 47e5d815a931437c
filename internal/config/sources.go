package config

import (
	"math"
	"net/url"
	"os"
	"path/filepath"
	"strings"

	"tallyd/capture"
	"tallyd/events/bus"
)

// streamSchemes are the URL schemes a url source may use.
var streamSchemes = map[string]bool{"rtsp": true, "rtsps": true, "http": true, "https": true}

// Display is what the source reads, fit for logs and status output: the URL
// with any password hidden (and the username field merged in), the device or
// the path.
func (s Source) Display() string {
	switch s.Kind() {
	case capture.KindURL:
		u, err := url.Parse(s.URL)
		if err != nil {
			return "(unparsable URL)"
		}
		if s.Username != "" {
			u.User = url.UserPassword(s.Username, redacted)
		}
		return u.Redacted()
	case capture.KindDevice:
		return "device " + s.Device
	case capture.KindFolder:
		return s.Folder
	case capture.KindFile:
		return s.File
	}
	return "generated scene"
}

// liveSource checks the keys of url, device and folder sources.
func (v *validator) liveSource(path string, s Source) {
	isURL := s.URL != ""
	if isURL {
		u, err := url.Parse(s.URL)
		switch {
		case err != nil || !streamSchemes[strings.ToLower(u.Scheme)]:
			v.fail(path+".url", "want an rtsp://, rtsps://, http:// or https:// URL (found %q)", bus.RedactURL(s.URL))
		case u.Host == "":
			v.fail(path+".url", "the URL has no host (found %q)", bus.RedactURL(s.URL))
		case u.User != nil && (s.Username != "" || s.Password != ""):
			v.fail(path+".username", "the url already holds credentials; set them in one place")
		}
		if s.Transport != "" {
			if s.Transport != "tcp" && s.Transport != "udp" {
				v.fail(path+".transport", "want tcp or udp (found %q)", s.Transport)
			} else if err == nil && !strings.HasPrefix(strings.ToLower(u.Scheme), "rtsp") {
				v.fail(path+".transport", "applies to rtsp:// URLs only")
			}
		}
		if s.Password != "" && s.Username == "" {
			v.fail(path+".password", "is set without username")
		}
	} else {
		for _, k := range []struct {
			key string
			set bool
		}{{"transport", s.Transport != ""}, {"username", s.Username != ""}, {"password", s.Password != ""},
			{"open_timeout", s.OpenTimeout.Duration != 0}, {"read_timeout", s.ReadTimeout.Duration != 0}} {
			if k.set {
				v.fail(path+"."+k.key, "applies to url sources only")
			}
		}
	}
	if isURL && s.OpenTimeout.Duration < 0 {
		v.fail(path+".open_timeout", "must not be negative (found %v)", s.OpenTimeout.Duration)
	}
	if isURL && s.ReadTimeout.Duration < 0 {
		v.fail(path+".read_timeout", "must not be negative (found %v)", s.ReadTimeout.Duration)
	}
	if s.Device != "" && !isDeviceIndex(s.Device) && !filepath.IsAbs(s.Device) {
		v.fail(path+".device", "want a camera index such as 0 or a path such as /dev/video0 (found %q)", s.Device)
	}
	if s.Folder != "" {
		p := v.c.Resolve(s.Folder)
		if st, err := os.Stat(p); err != nil {
			v.fail(path+".folder", "cannot open %q: %v", p, unwrapPathErr(err))
		} else if !st.IsDir() {
			v.fail(path+".folder", "%q is a file, want a folder of images", p)
		}
	}
	switch {
	case s.FolderFPS < 0 || math.IsNaN(s.FolderFPS):
		v.fail(path+".folder_fps", "must be positive, or 0 for the default %v (found %v)", capture.DefaultFolderFPS, s.FolderFPS)
	case s.FolderFPS != 0 && s.Folder == "":
		v.fail(path+".folder_fps", "applies to folder sources only")
	}
}

// isDeviceIndex reports whether s is a camera index: 1 to 3 decimal digits.
func isDeviceIndex(s string) bool {
	if len(s) == 0 || len(s) > 3 {
		return false
	}
	for _, c := range s {
		if c < '0' || c > '9' {
			return false
		}
	}
	return true
}
