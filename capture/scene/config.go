package scene

import (
	"errors"
	"fmt"
	"time"
)

// Defaults that WithDefaults puts in place of zero fields.
const (
	DefaultWidth     = 640
	DefaultHeight    = 360
	DefaultFPS       = 10.0
	DefaultDuration  = 150 * time.Second
	DefaultNoise     = 2.0
	DefaultCrossings = 26
	DefaultVisitors  = 8
)

// Limits that Validate enforces.
const (
	MinWidth, MaxWidth        = 320, 3840
	MinHeight, MaxHeight      = 180, 2160
	MaxPixels                 = 16_000_000 // width x height; capture.DefaultMaxFramePixels
	MinFPS, MaxFPS            = 5.0, 60.0
	MinDuration, MaxDuration  = 30 * time.Second, 2 * time.Hour
	MaxNoise                  = 32.0
	MaxCrossings, MaxVisitors = 1000, 200
)

// Config describes one generated scene. WithDefaults fills zero fields, so
// Config{Seed: n}.WithDefaults() is the standard 150 s walkway at 640x360;
// New takes the config as given.
type Config struct {
	// Seed picks the scenario: the same seed always gives the same frames and
	// the same ground truth.
	Seed int64
	// Width and Height are the frame size in pixels (default 640x360).
	Width, Height int
	// FPS is the frame rate (default 10).
	FPS float64
	// Duration is the length of the scene (default 150 s).
	Duration time.Duration
	// Noise is the standard deviation of the per-pixel sensor noise in grey
	// levels (default 2; 0 after WithDefaults gives clean frames).
	Noise float64
	// Crossings is the number of through-walkers planned in each direction
	// (default 26). Visitors leaving through the gate add to the downward count.
	Crossings int
	// Visitors is the number of people who stop at the ticket machines
	// (default 8): half with a short wait, half with a long one.
	Visitors int
}

// WithDefaults returns c with every zero field set to its default.
func (c Config) WithDefaults() Config {
	if c.Width == 0 {
		c.Width = DefaultWidth
	}
	if c.Height == 0 {
		c.Height = DefaultHeight
	}
	if c.FPS == 0 {
		c.FPS = DefaultFPS
	}
	if c.Duration == 0 {
		c.Duration = DefaultDuration
	}
	if c.Noise == 0 {
		c.Noise = DefaultNoise
	}
	if c.Crossings == 0 {
		c.Crossings = DefaultCrossings
	}
	if c.Visitors == 0 {
		c.Visitors = DefaultVisitors
	}
	return c
}

// ErrInvalidConfig is matched by errors.Is on every error Validate returns.
var ErrInvalidConfig = errors.New("scene: invalid config")

// FieldError is one rule that one Config field breaks.
type FieldError struct {
	Field string // config key: width, height, fps, duration, noise, crossings, visitors
	Rule  string // the rule broken, e.g. "must be between 5 and 60"
	Value any    // the value found
}

// Error reads "scene: <field> <rule>, got <value>".
func (e *FieldError) Error() string {
	return fmt.Sprintf("scene: %s %s, got %v", e.Field, e.Rule, e.Value)
}

// Is makes every FieldError match ErrInvalidConfig.
func (e *FieldError) Is(target error) bool { return target == ErrInvalidConfig }

// Validate checks c as it is (call WithDefaults first to accept zero fields)
// and returns every broken rule at once, joined, each a *FieldError.
func (c Config) Validate() error {
	var errs []error
	bad := func(field, rule string, v any) {
		errs = append(errs, &FieldError{Field: field, Rule: rule, Value: v})
	}
	between := func(lo, hi any) string { return fmt.Sprintf("must be between %v and %v", lo, hi) }
	if c.Width < MinWidth || c.Width > MaxWidth {
		bad("width", between(MinWidth, MaxWidth), c.Width)
	}
	if c.Height < MinHeight || c.Height > MaxHeight {
		bad("height", between(MinHeight, MaxHeight), c.Height)
	}
	if int64(c.Width)*int64(c.Height) > MaxPixels {
		bad("width", fmt.Sprintf("times height must be at most %d pixels", MaxPixels), fmt.Sprintf("%dx%d", c.Width, c.Height))
	}
	if !(c.FPS >= MinFPS && c.FPS <= MaxFPS) { // also rejects NaN
		bad("fps", between(MinFPS, MaxFPS), c.FPS)
	}
	if c.Duration < MinDuration || c.Duration > MaxDuration {
		bad("duration", between(MinDuration, MaxDuration), c.Duration)
	}
	if !(c.Noise >= 0 && c.Noise <= MaxNoise) {
		bad("noise", between(0, MaxNoise), c.Noise)
	}
	if c.Crossings < 0 || c.Crossings > MaxCrossings {
		bad("crossings", between(0, MaxCrossings), c.Crossings)
	}
	if c.Visitors < 0 || c.Visitors > MaxVisitors {
		bad("visitors", between(0, MaxVisitors), c.Visitors)
	}
	return errors.Join(errs...)
}
