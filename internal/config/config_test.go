package config

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

const base = `site: ferry-terminal
sources:
  - id: walkway
    scene:
      seed: 1
rules:
  - name: gate
    source: walkway
    line: [[0.1, 0.5], [0.9, 0.5]]
`

func TestParseValid(t *testing.T) {
	cfg, err := Parse("site.yaml", []byte(base))
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Detector.Kind != "motion" || cfg.Tracker.IoU.BirthHits != DefaultBirthHits {
		t.Errorf("defaults not applied: %+v", cfg.Detector)
	}
	r := cfg.Rules[0]
	if r.Anchor != DefaultAnchor || r.Band == nil || *r.Band != DefaultBand || r.Kind() != "line" {
		t.Errorf("rule defaults: %+v", r)
	}
	if cfg.Output.NATS.Embedded.Port != DefaultNATSPort || cfg.Output.NATS.Prefix != "tallyd" {
		t.Errorf("output defaults: %+v", cfg.Output)
	}
}

// TestErrors checks every error message exactly: file, line, key path, rule, value.
func TestErrors(t *testing.T) {
	tests := []struct {
		name, yaml, want string
	}{
		{"malformed YAML", "site: [ferry\n", "site.yaml:1: malformed YAML: did not find expected ',' or ']'"},
		{"empty", "", "site.yaml: file is empty"},
		{"unknown key", base + "sauce: 1\n",
			"site.yaml:10: sauce: unknown key (known keys: detector, log, output, rules, site, sources, tracker)"},
		{"unknown nested key", strings.Replace(base, "      seed: 1", "      seed: 1\n      sed: 2", 1),
			"site.yaml:6: sources[0].scene.sed: unknown key (known keys: crossings, duration, fps, height, noise, seed, visitors, width)"},
		{"wrong type", strings.Replace(base, "      seed: 1", "      seed: one", 1),
			`site.yaml:5: sources[0].scene.seed: want a whole number (found "one")`},
		{"bad duration", base + "    dwell: soon\n",
			`site.yaml:10: rules[0].dwell: want a duration such as "10s" (found "soon")`},
		{"missing site", strings.Replace(base, "site: ferry-terminal\n", "", 1), "site.yaml: site: is required"},
		{"bad site token", strings.Replace(base, "ferry-terminal", "ferry terminal", 1),
			`site.yaml:1: site: use only letters, digits, '-' and '_' (found "ferry terminal")`},
		{"zero-length line", strings.Replace(base, "[[0.1, 0.5], [0.9, 0.5]]", "[[0.4, 0.5], [0.4, 0.5]]", 1),
			"site.yaml:9: rules[0].line: line has zero length (both points are [0.4, 0.5])"},
		{"line outside frame", strings.Replace(base, "[[0.1, 0.5], [0.9, 0.5]]", "[[0.1, 0.5], [1.9, 0.5]]", 1),
			"site.yaml:9: rules[0].line[1]: coordinates are fractions of the frame within 0..1 (found [1.9, 0.5])"},
		{"self-intersecting zone", strings.Replace(base, "line: [[0.1, 0.5], [0.9, 0.5]]", "zone: [[0.1, 0.1], [0.9, 0.9], [0.9, 0.1], [0.1, 0.9]]", 1),
			"site.yaml:9: rules[0].zone: zone edges 1 and 3 cross each other (self-intersecting polygon)"},
		{"two-point zone", strings.Replace(base, "line: [[0.1, 0.5], [0.9, 0.5]]", "zone: [[0.1, 0.1], [0.9, 0.9]]", 1),
			"site.yaml:9: rules[0].zone: a zone has at least 3 points (found 2)"},
		{"unknown rule source", strings.Replace(base, "    source: walkway", "    source: quay", 1),
			`site.yaml:8: rules[0].source: no source has id "quay"`},
		{"missing video file", strings.Replace(base, "    scene:\n      seed: 1", "    file: nowhere.avi", 1),
			`site.yaml:4: sources[0].file: cannot open "nowhere.avi": no such file or directory`},
		{"two kinds of source", strings.Replace(base, "    scene:", "    url: rtsp://cam.local/1\n    scene:", 1),
			"site.yaml:3: sources[0]: set exactly one of file, url and scene (found 2)"},
		{"negative fps", strings.Replace(base, "    scene:", "    fps: -5\n    scene:", 1),
			"site.yaml:4: sources[0].fps: must be 0 (every frame) or positive (found -5)"},
		{"dwell on a line", base + "    dwell: 5s\n", "site.yaml:10: rules[0].dwell: applies to zones only"},
		{"bad anchor", base + "    anchor: feet\n",
			`site.yaml:10: rules[0].anchor: want bottom-center, center or top-center (found "feet")`},
		{"bad detector", base + "detector:\n  kind: magic\n", `site.yaml:11: detector.kind: want motion or file (found "magic")`},
		{"bad nats url", base + "output:\n  nats:\n    url: http://user:secret@x:1\n",
			`site.yaml:12: output.nats.url: want nats://host:port (found "http://user:xxxxx@x:1")`},
		{"duplicate source", strings.Replace(base, "rules:", "  - id: walkway\n    scene: {seed: 2}\nrules:", 1),
			`site.yaml:6: sources[1].id: duplicate source id "walkway"`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Parse("site.yaml", []byte(tt.yaml))
			if err == nil {
				t.Fatalf("no error, want %q", tt.want)
			}
			if !errors.Is(err, ErrInvalid) {
				t.Errorf("error does not wrap ErrInvalid: %v", err)
			}
			if err.Error() != tt.want {
				t.Errorf("error\n got: %s\nwant: %s", err, tt.want)
			}
		})
	}
}

func TestAllErrorsAtOnce(t *testing.T) {
	y := strings.Replace(base, "ferry-terminal", "", 1) + "tracker:\n  iou:\n    min_iou: 2\n    birth_hits: 0\n"
	_, err := Parse("site.yaml", []byte(y))
	var es Errors
	if !errors.As(err, &es) || len(es) != 3 {
		t.Fatalf("want 3 errors, got %v", err)
	}
}

func TestMissingFile(t *testing.T) {
	_, err := Load(filepath.Join(t.TempDir(), "absent.yaml"))
	if err == nil || !errors.Is(err, ErrInvalid) || !strings.HasSuffix(err.Error(), "absent.yaml: cannot read site file: no such file or directory") {
		t.Fatalf("err = %v", err)
	}
}

// TestShippedConfigs loads every file in configs/ (sources they name may be
// absent on a machine without ../shared, which is reported, not failed).
func TestShippedConfigs(t *testing.T) {
	files, _ := filepath.Glob("../../configs/*.yaml")
	if len(files) == 0 {
		t.Fatal("no configs found")
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			_, err := Load(f)
			if err != nil && strings.Contains(err.Error(), "shared/") && strings.Contains(err.Error(), "no such file") {
				if _, serr := os.Stat("../../../shared"); serr != nil {
					t.Skipf("shared data absent: %v", err)
				}
			}
			if err != nil {
				t.Fatal(err)
			}
		})
	}
}

func FuzzParse(f *testing.F) {
	f.Add([]byte(base))
	f.Add([]byte("site: x\nsources: [{id: a, scene: {seed: 1}}]\n"))
	f.Add([]byte("{"))
	f.Fuzz(func(t *testing.T, data []byte) {
		cfg, err := Parse("fuzz.yaml", data)
		if err == nil && cfg == nil {
			t.Fatal("nil config without error")
		}
		if err != nil && !errors.Is(err, ErrInvalid) {
			t.Fatalf("error does not wrap ErrInvalid: %v", err)
		}
	})
}
