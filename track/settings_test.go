package track

import (
	"errors"
	"reflect"
	"slices"
	"testing"
	"time"

	"tallyd/detect"
)

func TestDefaultSettings(t *testing.T) {
	s := DefaultSettings()
	if s.Kind != KindByteTrack || Kinds[0] != DefaultKind {
		t.Errorf("default kind %q, Kinds %v; want bytetrack, listed first", s.Kind, Kinds)
	}
	if !reflect.DeepEqual(s.ByteTrack, DefaultByteTrackConfig()) || !reflect.DeepEqual(s.Baseline, DefaultIoUConfig()) {
		t.Errorf("DefaultSettings = %+v, want the trackers' own defaults", s)
	}
	for _, k := range Kinds {
		s.Kind = k
		if err := s.Validate(); err != nil {
			t.Errorf("kind %s: Validate: %v", k, err)
		}
	}
}

// Every message of Settings.Validate, exactly: the selected tracker's
// problems under its block's key, or the unknown kind.
func TestSettingsValidate(t *testing.T) {
	with := func(f func(*Settings)) Settings { s := DefaultSettings(); f(&s); return s }
	tests := []struct {
		name   string
		s      Settings
		want   string   // "" when valid
		fields []string // ConfigError fields, in order
	}{
		{"defaults", DefaultSettings(), "", nil},
		{"baseline", with(func(s *Settings) { s.Kind = KindBaseline }), "", nil},
		{"unknown kind", with(func(s *Settings) { s.Kind = "sort" }),
			`kind: want bytetrack or baseline (found "sort")`, []string{"kind"}},
		{"empty kind", Settings{}, `kind: want bytetrack or baseline (found "")`, []string{"kind"}},
		{"bytetrack problems", with(func(s *Settings) {
			s.ByteTrack.HighScore, s.ByteTrack.LostTTL, s.ByteTrack.Motion.Acceleration = 2, -time.Second, -1
		}), "bytetrack.high_score: must be within (0, 1] (found 2)\n" +
			"bytetrack.lost_ttl: must not be negative (found -1s)\n" +
			"bytetrack.motion.acceleration: must be finite and not negative (found -1)",
			[]string{"bytetrack.high_score", "bytetrack.lost_ttl", "bytetrack.motion.acceleration"}},
		{"baseline problems", with(func(s *Settings) {
			s.Kind, s.Baseline.MinIoU, s.Baseline.MaxMisses = KindBaseline, 0, -1
		}), "iou.min_iou: must be within (0, 1] (found 0)\niou.max_misses: must not be negative (found -1)",
			[]string{"iou.min_iou", "iou.max_misses"}},
		// The settings of the tracker not chosen are not used, so not judged.
		{"bad baseline block ignored by bytetrack", with(func(s *Settings) { s.Baseline = IoUConfig{} }), "", nil},
		{"bad bytetrack block ignored by baseline", with(func(s *Settings) { s.Kind, s.ByteTrack = KindBaseline, ByteTrackConfig{} }), "", nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			err := tt.s.Validate()
			if fields := checkConfigErrors(t, err, tt.want); !slices.Equal(fields, tt.fields) {
				t.Errorf("fields %q, want %q", fields, tt.fields)
			}
			if tt.want == "" {
				return
			}
			if tr, err2 := tt.s.New(); tr != nil || err2 == nil || err2.Error() != tt.want {
				t.Errorf("New = %v, %v; want nil and the Validate error", tr, err2)
			}
		})
	}
}

// checkConfigErrors fails unless err is nil when want is "" and otherwise
// reads want exactly and joins *ConfigError values only; it returns their
// fields.
func checkConfigErrors(t *testing.T, err error, want string) []string {
	t.Helper()
	if want == "" {
		if err != nil {
			t.Fatalf("Validate: %v", err)
		}
		return nil
	}
	if err == nil || err.Error() != want {
		t.Fatalf("Validate error\n got: %v\nwant: %s", err, want)
	}
	joined, ok := err.(interface{ Unwrap() []error })
	if !ok {
		t.Fatalf("error %T is not joined with errors.Join", err)
	}
	var fields []string
	for _, e := range joined.Unwrap() {
		var ce *ConfigError
		if !errors.As(e, &ce) {
			t.Fatalf("error %T is not a *ConfigError", e)
		}
		fields = append(fields, ce.Field)
	}
	return fields
}

func TestSettingsNew(t *testing.T) {
	for _, c := range []struct {
		kind Kind
		want any
	}{{KindByteTrack, &ByteTrack{}}, {KindBaseline, &IoU{}}} {
		s := DefaultSettings()
		s.Kind = c.kind
		s.Baseline.BirthHits, s.ByteTrack.BirthHits = 1, 1
		tr, err := s.New()
		if err != nil {
			t.Fatalf("%s: %v", c.kind, err)
		}
		if reflect.TypeOf(tr) != reflect.TypeOf(c.want) {
			t.Errorf("%s: New built a %T, want %T", c.kind, tr, c.want)
		}
		// The settings reach the tracker: with BirthHits 1 a detection is
		// confirmed in its first frame.
		res := tr.Update(0, []detect.Detection{{Box: detect.BoxXYWH(10, 10, 20, 40), Score: 0.9, Class: "person"}})
		if len(res.Active) != 1 || res.Active[0].ID != 1 {
			t.Errorf("%s: first update Active %+v, want track 1", c.kind, res.Active)
		}
	}
}
