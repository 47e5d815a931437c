package scene

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"
)

func TestWithDefaults(t *testing.T) {
	tests := []struct {
		name string
		in   Config
		want Config
	}{
		{"zero", Config{}, Config{Width: 640, Height: 360, FPS: 10, Duration: 150 * time.Second, Noise: 2, Crossings: 26, Visitors: 8}},
		{"kept", Config{Seed: 9, Width: 1280, Height: 720, FPS: 25, Duration: time.Minute, Noise: 5, Crossings: 10, Visitors: 2},
			Config{Seed: 9, Width: 1280, Height: 720, FPS: 25, Duration: time.Minute, Noise: 5, Crossings: 10, Visitors: 2}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := tt.in.WithDefaults(); got != tt.want {
				t.Errorf("WithDefaults() = %+v, want %+v", got, tt.want)
			}
		})
	}
}

func TestValidate(t *testing.T) {
	ok := Config{}.WithDefaults()
	with := func(f func(*Config)) Config { c := ok; f(&c); return c }
	tests := []struct {
		name string
		cfg  Config
		want string // "" for valid
	}{
		{"defaults", ok, ""},
		{"limits low", with(func(c *Config) {
			c.Width, c.Height, c.FPS, c.Duration, c.Noise, c.Crossings, c.Visitors = 320, 180, 5, 30*time.Second, 0, 0, 0
		}), ""},
		{"limits high", with(func(c *Config) {
			c.Width, c.Height, c.FPS, c.Duration, c.Noise, c.Crossings, c.Visitors = 3840, 2160, 60, 2*time.Hour, 32, 1000, 200
		}), ""},
		{"width", with(func(c *Config) { c.Width = 100 }), "scene: width must be between 320 and 3840, got 100"},
		{"height", with(func(c *Config) { c.Height = 4000 }), "scene: height must be between 180 and 2160, got 4000"},
		{"pixels", with(func(c *Config) { c.Width, c.Height = 8192, 8192 }), "scene: width must be between 320 and 3840, got 8192\n" +
			"scene: height must be between 180 and 2160, got 8192\n" +
			"scene: width times height must be at most 16000000 pixels, got 8192x8192"},
		{"fps", with(func(c *Config) { c.FPS = 0.5 }), "scene: fps must be between 5 and 60, got 0.5"},
		{"fps nan", with(func(c *Config) { c.FPS = math.NaN() }), "scene: fps must be between 5 and 60, got NaN"},
		{"duration", with(func(c *Config) { c.Duration = 10 * time.Second }), "scene: duration must be between 30s and 2h0m0s, got 10s"},
		{"noise", with(func(c *Config) { c.Noise = -1 }), "scene: noise must be between 0 and 32, got -1"},
		{"crossings", with(func(c *Config) { c.Crossings = 1001 }), "scene: crossings must be between 0 and 1000, got 1001"},
		{"visitors", with(func(c *Config) { c.Visitors = -2 }), "scene: visitors must be between 0 and 200, got -2"},
		{"zero config", Config{}, "scene: width must be between 320 and 3840, got 0\n" +
			"scene: height must be between 180 and 2160, got 0\n" +
			"scene: fps must be between 5 and 60, got 0\n" +
			"scene: duration must be between 30s and 2h0m0s, got 0s"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			err := tt.cfg.Validate()
			if tt.want == "" {
				if err != nil {
					t.Fatalf("Validate() = %v, want nil", err)
				}
				return
			}
			if err == nil {
				t.Fatalf("Validate() = nil, want %q", tt.want)
			}
			if err.Error() != tt.want {
				t.Errorf("Validate() =\n%s\nwant\n%s", err, tt.want)
			}
			if !errors.Is(err, ErrInvalidConfig) {
				t.Errorf("errors.Is(%v, ErrInvalidConfig) = false", err)
			}
			var fe *FieldError
			if !errors.As(err, &fe) || fe.Field == "" {
				t.Errorf("errors.As(%v, *FieldError) found no field", err)
			}
		})
	}
}

func TestNewErrors(t *testing.T) {
	tests := []struct {
		name string
		cfg  Config
		is   error
		want string // message prefix
	}{
		{"bad config", Config{Width: 10}.WithDefaults(), ErrInvalidConfig, "scene: width must be between 320 and 3840, got 10"},
		{"defaults not applied", Config{Seed: 1}, ErrInvalidConfig, "scene: width must be between 320 and 3840, got 0\n"},
		{"crowded", Config{Seed: 1, Duration: 30 * time.Second, Crossings: 200}.WithDefaults(), ErrCrowded,
			"scene: seed 1: too many walkers for the duration: placed "},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := New(tt.cfg)
			if !errors.Is(err, tt.is) {
				t.Fatalf("New() error = %v, want one matching %v", err, tt.is)
			}
			if !strings.HasPrefix(err.Error(), tt.want) {
				t.Errorf("New() error = %q, want it to start with %q", err, tt.want)
			}
			if errors.Is(err, ErrCrowded) && !strings.HasSuffix(err.Error(), "; lower crossings (200) or visitors (8), or raise duration (30s)") {
				t.Errorf("New() error = %q does not say which keys to change", err)
			}
		})
	}
}
