package config

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

const editSite = `# The ferry terminal's walkway.
site: ferry-terminal
sources:
  - id: walkway
    scene: {seed: 1}
  - id: quay
    scene: {seed: 2}
rules:
  # The boarding gate: down the frame is "in".
  - name: gate
    source: walkway
    line: [[0.1, 0.5], [0.9, 0.5]]
  # Stays on the quay.
  - name: quay-zone
    source: quay
    zone: [[0.1, 0.1], [0.5, 0.1], [0.5, 0.5]]
`

// TestReplaceRules swaps one source's rules: the other source's rules and
// the comments outside the replaced rules survive, and the result loads.
func TestReplaceRules(t *testing.T) {
	band := 0.05
	rules := []Rule{
		{Name: "gate", Line: [][2]float64{{0.2, 0.55556}, {0.8, 0.55}}, Classes: []string{"person"}},
		{Name: "benches", Zone: [][2]float64{{0.1, 0.1}, {0.3, 0.1}, {0.3, 0.3}}, Dwell: Duration{10 * time.Second}, Band: &band},
	}
	out, pos, err := ReplaceRules([]byte(editSite), "walkway", rules)
	if err != nil {
		t.Fatal(err)
	}
	s := string(out)
	for _, want := range []string{"# The ferry terminal's walkway.", "# Stays on the quay.", "line: [[0.2, 0.5556], [0.8, 0.55]]",
		"classes: [person]", "dwell: 10s", "band: 0.05", "name: quay-zone"} {
		if !strings.Contains(s, want) {
			t.Errorf("edited file lacks %q:\n%s", want, s)
		}
	}
	if strings.Contains(s, "[0.1, 0.5], [0.9, 0.5]") {
		t.Errorf("the old gate is still there:\n%s", s)
	}
	if len(pos) != 2 || pos[0] != 0 || pos[1] != 1 {
		t.Errorf("positions %v, want [0 1]", pos)
	}
	path := filepath.Join(t.TempDir(), "site.yaml")
	if err := WriteFileAtomic(path, out); err != nil {
		t.Fatal(err)
	}
	cfg, err := Load(path)
	if err != nil {
		t.Fatalf("edited file does not load: %v\n%s", err, s)
	}
	if len(cfg.Rules) != 3 || cfg.Rules[1].Name != "benches" || cfg.Rules[1].Source != "walkway" || cfg.Rules[2].Source != "quay" {
		t.Errorf("rules after the edit: %+v", cfg.Rules)
	}
	if entries, _ := os.ReadDir(filepath.Dir(path)); len(entries) != 1 {
		t.Errorf("temporary files left beside the site file: %v", entries)
	}
}

// TestRulesYAMLLoads: the fragment the page shows is the site file's own
// syntax: pasted under a site, it loads to the same rules.
func TestRulesYAMLLoads(t *testing.T) {
	rules := []Rule{{Name: "gate-north", Source: "walkway", Line: [][2]float64{{0.1, 0.5}, {0.9, 0.5}}}}
	y := RulesYAML(rules)
	cfg, err := Parse("site.yaml", []byte("site: ferry-terminal\nsources:\n  - id: walkway\n    scene: {seed: 1}\n"+y))
	if err != nil {
		t.Fatalf("%v\n%s", err, y)
	}
	if cfg.Rules[0].Name != "gate-north" || cfg.Rules[0].Line[1] != [2]float64{0.9, 0.5} {
		t.Errorf("rules %+v from\n%s", cfg.Rules, y)
	}
}
