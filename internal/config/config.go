// Package config reads and checks a tallyd site file: which cameras or
// recordings to read, how to detect and track, which lines and zones to count
// and where to publish the events.
//
// Coordinates: every rule coordinate is a fraction of the source frame, x in
// 0..1 from the left edge and y in 0..1 from the top edge, so a site file does
// not change when a camera's resolution does. The daemon converts them to
// source pixels once the first frame's size is known. Distances given as
// fractions (line and zone bands) are fractions of the frame height.
package config

import (
	"time"

	"tallyd/capture"
	"tallyd/detect/motion"
	"tallyd/events"
	"tallyd/track"
)

// Config is one site file.
type Config struct {
	// Site names the place being counted; it is a NATS subject token.
	Site     string   `yaml:"site"`
	Sources  []Source `yaml:"sources"`
	Detector Detector `yaml:"detector"`
	Tracker  Tracker  `yaml:"tracker"`
	Rules    []Rule   `yaml:"rules"`
	Output   Output   `yaml:"output"`
	Log      Log      `yaml:"log"`
	// StateDir holds what tallyd keeps between runs: the outbox and the
	// embedded server's JetStream store. Relative to the site file's
	// folder; default .tallyd.
	StateDir  string    `yaml:"state_dir"`
	Intervals Intervals `yaml:"intervals"`
	HTTP      HTTP      `yaml:"http"`
	// Fleet configures a site shared by several daemons (see CheckShared).
	Fleet Fleet `yaml:"fleet"`

	// File is the path the config was read from ("" when built in code).
	File  string `yaml:"-"`
	lines lineIndex
}

// Source is one camera stream, local camera, recorded file, image folder or
// generated scene. Exactly one of File, URL, Device, Folder and Scene is set.
type Source struct {
	ID     string `yaml:"id"`
	File   string `yaml:"file"`   // recorded video, relative to the config file's folder
	URL    string `yaml:"url"`    // stream URL (rtsp, rtsps, http, https) read through OpenCV's FFmpeg backend
	Device string `yaml:"device"` // local camera: an index such as 0 or a path such as /dev/video0
	Folder string `yaml:"folder"` // image folder (jpg, png, bmp in name order), relative to the config file's folder
	Scene  *Scene `yaml:"scene"`  // generated ferry-terminal scene with known truth
	// FolderFPS is the frame rate given to a folder's images (0: DefaultFolderFPS).
	FolderFPS float64 `yaml:"folder_fps"`
	// Stream settings, for url sources only; zero durations take the defaults.
	Transport   string   `yaml:"transport"`    // RTSP media transport: tcp (default) or udp
	Username    string   `yaml:"username"`     // merged into the URL when the stream is opened
	Password    Secret   `yaml:"password"`     // merged into the URL when opened; never printed
	OpenTimeout Duration `yaml:"open_timeout"` // connecting and reading the first frame
	ReadTimeout Duration `yaml:"read_timeout"` // longest wait for a frame before reconnecting
	// FPS is the target processing rate; frames beyond it are dropped on
	// purpose (counted). 0 processes every frame the source delivers.
	FPS float64 `yaml:"fps"`
	// StartTime is the wall-clock time of the source's first frame, used for
	// event times of recorded and generated sources. Empty means the time the
	// run started. RFC 3339.
	StartTime string `yaml:"start_time"`
	// MaxAge drops a frame that waited longer than this for the detector
	// (counted as too old). 0 never drops for age.
	MaxAge Duration `yaml:"max_age"`
	// Gate runs the detector only on frames with motion.
	Gate *Gate `yaml:"gate"`
	// MaxFramePixels refuses frames larger than this many pixels (0: the
	// capture default, 16 megapixels).
	MaxFramePixels int `yaml:"max_frame_pixels"`
}

// Gate configures motion gating: a cheap frame difference decides whether a
// frame is worth the detector.
type Gate struct {
	// Where looks for change "anywhere" in the frame or only in the
	// "rules" regions (zones, and a band around each line) of this source.
	Where motion.GateWhere `yaml:"where"`
	// Threshold is the fraction of (downscaled) pixels that must change.
	Threshold float64 `yaml:"threshold"`
	// Hold keeps detecting this long after the last change.
	Hold Duration `yaml:"hold"`
}

// Scene configures a generated scene source.
type Scene struct {
	Seed      int64    `yaml:"seed"`
	Width     int      `yaml:"width"`
	Height    int      `yaml:"height"`
	FPS       float64  `yaml:"fps"`
	Duration  Duration `yaml:"duration"`
	Noise     *float64 `yaml:"noise"`
	Crossings *int     `yaml:"crossings"` // unset: the scene's default; 0 is none
	Visitors  *int     `yaml:"visitors"`  // unset: the scene's default; 0 is none
}

// DetectorKind names the detector shared by all sources.
type DetectorKind string

// Detector kinds.
const (
	DetectorMotion DetectorKind = "motion" // background subtraction, no weights
	DetectorFile   DetectorKind = "file"   // precomputed detections, MOTChallenge text format
	DetectorONNX   DetectorKind = "onnx"   // a YOLO-family ONNX model
)

// DetectorKinds lists the detector kinds, the default first.
var DetectorKinds = []DetectorKind{DetectorMotion, DetectorFile, DetectorONNX}

// Detector selects and configures the detector shared by all sources.
type Detector struct {
	Kind DetectorKind `yaml:"kind"`
	// Class is the class name given to detections of detectors that do not
	// classify (motion, file).
	Class  string         `yaml:"class"`
	Motion Motion         `yaml:"motion"`
	File   DetectionFiles `yaml:"file"`
	ONNX   ONNX           `yaml:"onnx"`
}

// Motion configures the background-subtraction detector.
type Motion struct {
	History      int     `yaml:"history"`       // frames the background model remembers
	VarThreshold float64 `yaml:"var_threshold"` // squared Mahalanobis distance for foreground
	LearningRate float64 `yaml:"learning_rate"` // background update rate after warm-up (0..1)
	WarmupFrames int     `yaml:"warmup_frames"` // frames learned at OpenCV's automatic rate first
	MinArea      float64 `yaml:"min_area"`      // smallest box area kept, in source pixels
	OpenKernel   int     `yaml:"open_kernel"`   // morphological opening kernel size (px), removes specks
	CloseKernel  int     `yaml:"close_kernel"`  // morphological closing kernel size (px), fills holes
}

// DetectionFiles configures the detections-file detector.
type DetectionFiles struct {
	// Paths maps a source ID to its detections file.
	Paths    map[string]string `yaml:"paths"`
	MinScore float64           `yaml:"min_score"`
}

// Tracker configures the tracker used for every source.
type Tracker struct {
	// Kind is bytetrack (Kalman motion model, optimal two-stage
	// association) or baseline (the first-version IoU tracker).
	Kind      track.Kind `yaml:"kind"`
	IoU       IoU        `yaml:"iou"`       // settings of the baseline
	ByteTrack ByteTrack  `yaml:"bytetrack"` // settings of bytetrack
}

// IoU configures the baseline IoU tracker.
type IoU struct {
	MinIoU    float64 `yaml:"min_iou"`
	BirthHits int     `yaml:"birth_hits"`
	MaxMisses int     `yaml:"max_misses"`
	PerClass  bool    `yaml:"per_class"`
}

// ByteTrack configures the ByteTrack tracker (see track.ByteTrackConfig).
type ByteTrack struct {
	HighScore     float64     `yaml:"high_score"`
	LowScore      float64     `yaml:"low_score"`
	NewTrackScore float64     `yaml:"new_track_score"`
	MatchIoU      float64     `yaml:"match_iou"`
	LowMatchIoU   float64     `yaml:"low_match_iou"`
	BirthHits     int         `yaml:"birth_hits"`
	LostTTL       Duration    `yaml:"lost_ttl"`
	LostFrames    int         `yaml:"lost_frames"`
	Scores        TrackScores `yaml:"scores"`
	PerClass      bool        `yaml:"per_class"`
	Motion        TrackMotion `yaml:"motion"`
}

// TrackScores says how bytetrack picks high_score and new_track_score (see
// track.ScoreCalibration): mode auto (the default) is fixed for the onnx
// and motion detectors, whose score scales are known, and warmup for
// detections read from files.
type TrackScores struct {
	Mode             track.ScoreMode `yaml:"mode"`
	WarmupDetections int             `yaml:"warmup_detections"`
	HighQuantile     float64         `yaml:"high_quantile"`
	NewQuantile      float64         `yaml:"new_quantile"`
}

// TrackMotion tunes the Kalman filter of bytetrack.
type TrackMotion struct {
	MeasurementNoise float64 `yaml:"measurement_noise"`
	Acceleration     float64 `yaml:"acceleration"`
	SizeAcceleration float64 `yaml:"size_acceleration"`
}

// Rule is a counting line or a zone on one source. Exactly one of Line and
// Zone is set.
type Rule struct {
	Name    string       `yaml:"name"`
	Source  string       `yaml:"source"`
	Line    [][2]float64 `yaml:"line"` // two points A, B; "in" is left→right of A→B as drawn
	Zone    [][2]float64 `yaml:"zone"` // polygon, at least three points, not self-intersecting
	Classes []string     `yaml:"classes"`
	// Anchor is the point of a box tested against the rule: bottom-center
	// (default; where feet touch the floor), center or top-center.
	Anchor events.Anchor `yaml:"anchor"`
	// Band is the hysteresis half-width as a fraction of the frame height: an
	// anchor this close to the line or zone edge keeps its previous side.
	Band *float64 `yaml:"band"`
	// Dwell raises one alert per stay when a track stays in the zone this long.
	Dwell Duration `yaml:"dwell"`
	// Area names a site-wide area this zone is part of: the area's
	// occupancy and totals are the sums over its zones, on any sources
	// (see Config.Areas). Zones only; a token like rule names.
	Area string `yaml:"area"`
}

// Log configures logging.
type Log struct {
	Level  string `yaml:"level"`  // debug, info, warn, error
	Format string `yaml:"format"` // text or json
}

// Duration is a time.Duration written as "10s", "1m30s".
type Duration struct{ time.Duration }

// Kind reports whether the rule is a line or a zone.
func (r Rule) Kind() events.RuleKind {
	if len(r.Zone) > 0 {
		return events.RuleZone
	}
	return events.RuleLine
}

// Kind reports what the source reads: a generated scene, a file, a device,
// an image folder or a stream URL.
func (s Source) Kind() capture.Kind {
	switch {
	case s.Scene != nil:
		return capture.KindScene
	case s.File != "":
		return capture.KindFile
	case s.Device != "":
		return capture.KindDevice
	case s.Folder != "":
		return capture.KindFolder
	default:
		return capture.KindURL
	}
}
