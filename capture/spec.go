package capture

import (
	"context"
	"errors"
	"log/slog"
	"net/url"
	"os"
	"strings"
	"sync"
	"time"
)

// Defaults for a SourceSpec's zero fields. internal/config documents the same
// values for the site file.
const (
	DefaultOpenTimeout = 10 * time.Second // connect and probe a stream
	DefaultReadTimeout = 5 * time.Second  // longest wait for one frame of a stream
	DefaultFolderFPS   = 10.0             // frame rate given to an image folder
	DefaultTransport   = "tcp"            // RTSP media over the RTSP connection
	// DefaultMaxFramePixels is the largest frame (width x height) a source
	// may deliver: 16 megapixels, above 4K UHD (8.3). Larger frames would
	// make the detectors' per-frame buffers exhaust memory.
	DefaultMaxFramePixels = 16_000_000
)

// Kind is what a source reads.
type Kind string

// Source kinds.
const (
	KindFile   Kind = "file"   // a recorded video file
	KindURL    Kind = "url"    // a stream: RTSP, HTTP(S) MJPEG
	KindDevice Kind = "device" // a local camera, by index or path
	KindFolder Kind = "folder" // a folder of images, in name order
	KindScene  Kind = "scene"  // a generated scene (NewGenerated), never opened by Open
)

// SourceSpec says how to open one source: the capture side of a site file's
// source entry. Exactly one of File, URL, Device and Folder is set; zero
// durations and rates take the defaults above.
type SourceSpec struct {
	ID     string // source ID, for errors
	File   string // video file path
	URL    string // stream URL; may hold user:password, never printed
	Device string // camera index such as "0", or a path such as /dev/video0
	Folder string // image folder path

	FolderFPS float64 // frames per second given to a folder's images

	// MaxFramePixels is the largest frame (width x height) accepted; a source
	// whose frames are larger fails with ErrTooLarge. 0 takes
	// DefaultMaxFramePixels.
	MaxFramePixels int

	// Streams (URL) only.
	Transport   string        // RTSP media transport: "tcp" or "udp"
	Username    string        // merged into the URL at open when set
	Password    string        // merged into the URL at open; never printed
	OpenTimeout time.Duration // connecting and reading the first frame
	ReadTimeout time.Duration // waiting for any later frame
}

// Kind reports which kind of source the spec describes.
func (s SourceSpec) Kind() Kind {
	switch {
	case s.URL != "":
		return KindURL
	case s.Device != "":
		return KindDevice
	case s.Folder != "":
		return KindFolder
	default:
		return KindFile
	}
}

// Live reports whether frames arrive on the source's own clock, so that a
// lost source should be reconnected rather than ended.
func (s SourceSpec) Live() bool { return s.Kind() == KindURL || s.Kind() == KindDevice }

// Name is what the source opens, fit for logs and errors: the URL with any
// password hidden, the device or the path.
func (s SourceSpec) Name() string {
	switch s.Kind() {
	case KindURL:
		u, err := url.Parse(s.URL)
		if err != nil {
			return "(unparsable URL)"
		}
		if s.Username != "" {
			u.User = url.UserPassword(s.Username, "x")
		}
		return u.Redacted()
	case KindDevice:
		if isIndex(s.Device) {
			return "device " + s.Device
		}
		return s.Device
	case KindFolder:
		return s.Folder
	default:
		return s.File
	}
}

func (s SourceSpec) withDefaults() SourceSpec {
	if s.OpenTimeout <= 0 {
		s.OpenTimeout = DefaultOpenTimeout
	}
	if s.ReadTimeout <= 0 {
		s.ReadTimeout = DefaultReadTimeout
	}
	if s.FolderFPS <= 0 {
		s.FolderFPS = DefaultFolderFPS
	}
	if s.Transport == "" {
		s.Transport = DefaultTransport
	}
	if s.MaxFramePixels <= 0 {
		s.MaxFramePixels = DefaultMaxFramePixels
	}
	return s
}

// streamURL is the URL OpenCV opens: the configured one with the credentials
// merged in. It is never logged.
func (s SourceSpec) streamURL() (*url.URL, error) {
	u, err := url.Parse(s.URL)
	if err != nil {
		return nil, reasonf(ErrUnsupported, "the URL cannot be parsed")
	}
	switch strings.ToLower(u.Scheme) {
	case "rtsp", "rtsps", "http", "https":
	default:
		return nil, reasonf(ErrUnsupported, "unsupported URL scheme %q (want rtsp, rtsps, http or https)", u.Scheme)
	}
	if u.Host == "" {
		return nil, reasonf(ErrUnsupported, "the URL has no host")
	}
	if s.Username != "" {
		u.User = url.UserPassword(s.Username, s.Password)
	}
	return u, nil
}

// Open opens a file, stream URL, device or image folder once, reads its
// first frame and describes it; it is the one way to open every kind of
// source but a generated scene (NewGenerated). Errors are *SourceError
// values naming the source and saying what is wrong, with any password
// hidden; errors.Is finds the sentinel (ErrUnreachable, ErrTooLarge, ...).
// Live sources (URL, device) should be read through a Reconnecting instead,
// which calls Open again after a loss; log receives repeated-problem reports
// of image folders.
func Open(spec SourceSpec, log *slog.Logger) (Reader, Info, error) {
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	spec = spec.withDefaults()
	fail := func(err error) (Reader, Info, error) {
		return nil, Info{}, &SourceError{Source: spec.ID, Op: "open", Target: spec.Name(), Err: err}
	}
	var (
		v   *Video
		err error
	)
	switch spec.Kind() {
	case KindFolder:
		f, err := openFolder(spec.Folder, spec.FolderFPS, spec.MaxFramePixels, log.With("source", spec.ID))
		if err != nil {
			return fail(err)
		}
		return f, f.Info(), nil
	case KindDevice:
		v, err = openDevice(spec.Device, spec.MaxFramePixels)
	case KindURL:
		v, err = openStream(spec)
	default: // KindFile
		v, err = openVideo(openFFmpeg(spec.File, "", nil), false, 0, spec.MaxFramePixels)
	}
	if err != nil {
		return fail(err)
	}
	v.name = spec.Name()
	return v, v.info, nil
}

// openStream opens a stream URL with the spec's timeouts and transport. When
// OpenCV cannot open it, a short probe of the server says why.
func openStream(spec SourceSpec) (*Video, error) {
	u, err := spec.streamURL()
	if err != nil {
		return nil, err
	}
	env := ""
	if strings.HasPrefix(strings.ToLower(u.Scheme), "rtsp") {
		env = "rtsp_transport;" + spec.Transport
	}
	start := time.Now()
	v, err := openVideo(openFFmpeg(u.String(), env, timeoutParams(spec.OpenTimeout, spec.ReadTimeout)),
		true, spec.ReadTimeout, spec.MaxFramePixels)
	if err == nil {
		return v, nil
	}
	if errors.Is(err, ErrUnsupported) || errors.Is(err, errOpenCV) {
		return nil, err
	}
	// When OpenCV waited the whole open timeout, the probe need not wait as
	// long again to tell a silent server from one that is not there.
	timedOut := time.Since(start) >= spec.OpenTimeout*9/10
	probe := spec.OpenTimeout
	if timedOut {
		probe = min(probe, time.Second)
	}
	ctx, cancel := context.WithTimeout(context.Background(), probe)
	defer cancel()
	if derr := diagnose(ctx, u, spec.OpenTimeout); derr != nil {
		return nil, derr
	}
	switch {
	case err == errNoFrame:
		return nil, reasonf(ErrTimeout, "the stream opened but no frame arrived within read_timeout %v", spec.ReadTimeout)
	case timedOut:
		return nil, reasonf(ErrTimeout, "the server answered but sent no video within open_timeout %v", spec.OpenTimeout)
	}
	return nil, reasonf(ErrNotVideo, "the server answered, but not with video OpenCV can decode")
}

// envGate sets OPENCV_FFMPEG_CAPTURE_OPTIONS around OpenCV opens. OpenCV's
// FFmpeg backend reads that variable when a capture opens and there is no
// open parameter for the RTSP transport. Opens wanting the same value run
// together; one wanting a different value waits until the others finished,
// so the variable never changes while an open may be reading it. Opens that
// do not care (files, HTTP) pass "" and run beside any value.
type envGate struct {
	key  string
	base string // the value found at start, kept ahead of ours

	mu   sync.Mutex
	cond *sync.Cond
	cur  string // what the variable holds beyond base
	n    int    // opens in progress
}

var ffmpegEnv = newEnvGate("OPENCV_FFMPEG_CAPTURE_OPTIONS")

func newEnvGate(key string) *envGate {
	g := &envGate{key: key, base: os.Getenv(key)}
	g.cond = sync.NewCond(&g.mu)
	return g
}

// with runs fn while the variable holds base plus opts ("" = any value).
func (g *envGate) with(opts string, fn func()) {
	g.mu.Lock()
	for opts != "" && g.n > 0 && g.cur != opts {
		g.cond.Wait()
	}
	if opts != "" && g.cur != opts {
		v := opts
		if g.base != "" {
			v = g.base + "|" + opts // later keys win in OpenCV's parser
		}
		_ = os.Setenv(g.key, v)
		g.cur = opts
	}
	g.n++
	g.mu.Unlock()
	defer func() {
		g.mu.Lock()
		g.n--
		if g.n == 0 {
			g.cond.Broadcast()
		}
		g.mu.Unlock()
	}()
	fn()
}
