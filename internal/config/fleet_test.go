package config

import (
	"errors"
	"reflect"
	"strings"
	"testing"
	"time"
)

// sharedSite is a ferry terminal shared by several daemons: two stream
// cameras and a generated scene, two areas.
const sharedSite = `site: ferry-terminal
sources:
  - id: quay-1
    url: rtsp://cam-1.ferry.example/live
  - id: quay-2
    url: rtsp://cam-2.ferry.example/live
  - id: walkway
    scene: {seed: 1}
rules:
  - name: hall
    source: quay-1
    zone: [[0.1, 0.1], [0.9, 0.1], [0.9, 0.9]]
    area: concourse
  - name: gate
    source: quay-1
    line: [[0.1, 0.5], [0.9, 0.5]]
  - name: ramp
    source: walkway
    zone: [[0.1, 0.1], [0.5, 0.1], [0.5, 0.5]]
    area: gangway
  - name: hall
    source: quay-2
    zone: [[0.2, 0.2], [0.8, 0.2], [0.8, 0.8]]
    area: concourse
output:
  nats:
    url: nats://nats-1.ferry.example:4222,nats://nats-2.ferry.example:4222
fleet:
  lease_ttl: 6s
`

func TestAreas(t *testing.T) {
	cfg, err := Parse("site.yaml", []byte(strings.Replace(sharedSite, "  - name: hall\n    source: quay-2", "  - name: hall-2\n    source: quay-2", 1)))
	if err != nil {
		t.Fatal(err)
	}
	want := map[string][]AreaZoneRef{
		"concourse": {{Source: "quay-1", Rule: "hall"}, {Source: "quay-2", Rule: "hall-2"}},
		"gangway":   {{Source: "walkway", Rule: "ramp"}},
	}
	if got := cfg.Areas(); !reflect.DeepEqual(got, want) {
		t.Errorf("Areas() = %v, want %v", got, want)
	}
	if got := cfg.AreaNames(); !reflect.DeepEqual(got, []string{"concourse", "gangway"}) {
		t.Errorf("AreaNames() = %v", got)
	}
	if cfg.Fleet.LeaseTTL.Duration != 6*time.Second {
		t.Errorf("lease_ttl %v, want 6s", cfg.Fleet.LeaseTTL)
	}
	none, err := Parse("site.yaml", []byte(base))
	if err != nil {
		t.Fatal(err)
	}
	if a := none.Areas(); a == nil || len(a) != 0 || none.AreaNames() != nil {
		t.Errorf("a site without areas: %v %v", a, none.AreaNames())
	}
}

func TestSharedSiteRuleNames(t *testing.T) {
	// Rule names are unique in a site file, across sources.
	_, err := Parse("site.yaml", []byte(sharedSite))
	if err == nil || err.Error() != `site.yaml:21: rules[3].name: duplicate rule name "hall"` {
		t.Errorf("err = %v", err)
	}
}

// TestCheckShared: the extra rules of a shared site, each error located.
func TestCheckShared(t *testing.T) {
	ok := strings.Replace(sharedSite, "  - name: hall\n    source: quay-2", "  - name: hall-2\n    source: quay-2", 1)
	tests := []struct {
		name, yaml, want string
	}{
		{"streams and scenes", ok, ""},
		{"own events file", strings.Replace(ok, "output:\n", "output:\n  jsonl: events.jsonl\n", 1), ""},
		{"required jetstream", strings.Replace(ok, "fleet:", "    jetstream: {mode: required}\nfleet:", 1), ""},
		{"embedded server", base,
			"site.yaml: output.nats.url: a shared site needs an external NATS server: the embedded one lives in one daemon"},
		{"jetstream off", strings.Replace(ok, "fleet:", "    jetstream: {mode: off}\nfleet:", 1),
			`site.yaml:28: output.nats.jetstream.mode: a shared site keeps its leases and state in JetStream: want auto or required (found "off")`},
		{"recorded file", strings.Replace(ok, "    scene: {seed: 1}", "    file: config.go", 1),
			"site.yaml:8: sources[2].file: a recorded file cannot be shared: replay it with one daemon"},
		{"image folder", strings.Replace(ok, "    scene: {seed: 1}", "    folder: .", 1),
			"site.yaml:8: sources[2].folder: an image folder cannot be shared: replay it with one daemon"},
		{"local camera", strings.Replace(ok, "    url: rtsp://cam-2.ferry.example/live", "    device: /dev/video0", 1),
			"site.yaml:6: sources[1].device: a local camera belongs to one machine: serve it as a stream (url) to share it"},
		{"all at once", strings.Replace(base, "    scene:\n      seed: 1", "    device: 0", 1) + "output:\n  nats:\n    jetstream: {mode: off}\n",
			"site.yaml:10: output.nats.url: a shared site needs an external NATS server: the embedded one lives in one daemon\n" +
				`site.yaml:11: output.nats.jetstream.mode: a shared site keeps its leases and state in JetStream: want auto or required (found "off")` + "\n" +
				"site.yaml:4: sources[0].device: a local camera belongs to one machine: serve it as a stream (url) to share it"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cfg, err := Parse("site.yaml", []byte(tc.yaml))
			if err != nil {
				t.Fatalf("the site itself is invalid: %v", err)
			}
			err = CheckShared(cfg)
			if tc.want == "" {
				if err != nil {
					t.Fatalf("CheckShared: %v", err)
				}
				return
			}
			if err == nil || err.Error() != tc.want {
				t.Fatalf("error\n got: %v\nwant: %s", err, tc.want)
			}
			if !errors.Is(err, ErrInvalid) {
				t.Errorf("error does not wrap ErrInvalid: %v", err)
			}
			// As a Check, the same errors come with the site file's own.
			_, perr := Parse("site.yaml", []byte(tc.yaml), SharedCheck)
			if perr == nil || perr.Error() != tc.want {
				t.Errorf("as a check:\n got: %v\nwant: %s", perr, tc.want)
			}
		})
	}
}

// TestAreaInRulesYAML: the rules the page writes back keep their area.
func TestAreaInRulesYAML(t *testing.T) {
	rules := []Rule{{Name: "hall", Source: "walkway", Zone: [][2]float64{{0.1, 0.1}, {0.9, 0.1}, {0.9, 0.9}}, Area: "concourse"}}
	y := RulesYAML(rules)
	cfg, err := Parse("site.yaml", []byte("site: ferry-terminal\nsources:\n  - id: walkway\n    scene: {seed: 1}\n"+y))
	if err != nil {
		t.Fatalf("%v\n%s", err, y)
	}
	if cfg.Rules[0].Area != "concourse" {
		t.Errorf("area lost: %+v from\n%s", cfg.Rules[0], y)
	}
}
