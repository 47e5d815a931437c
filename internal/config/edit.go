package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"gopkg.in/yaml.v3"

	"tallyd/events"
)

// RulesYAML writes rules in the site file's own syntax, as the `rules:`
// section holds them (coordinates as [x, y] fractions, 4 decimals).
func RulesYAML(rules []Rule) string {
	var b strings.Builder
	b.WriteString("rules:\n")
	for _, r := range rules {
		b.WriteString(ruleYAML(r))
	}
	return b.String()
}

func ruleYAML(r Rule) string {
	var b strings.Builder
	fmt.Fprintf(&b, "  - name: %s\n", yamlScalar(r.Name))
	fmt.Fprintf(&b, "    source: %s\n", yamlScalar(r.Source))
	if r.Line != nil {
		fmt.Fprintf(&b, "    line: %s\n", points(r.Line))
	}
	if r.Zone != nil {
		fmt.Fprintf(&b, "    zone: %s\n", points(r.Zone))
	}
	if r.Dwell.Duration > 0 {
		fmt.Fprintf(&b, "    dwell: %s\n", r.Dwell.Duration)
	}
	if r.Area != "" {
		fmt.Fprintf(&b, "    area: %s\n", yamlScalar(r.Area))
	}
	if r.Anchor != "" && r.Anchor != events.AnchorBottomCenter {
		fmt.Fprintf(&b, "    anchor: %s\n", r.Anchor)
	}
	if r.Band != nil && *r.Band != DefaultBand {
		fmt.Fprintf(&b, "    band: %s\n", strconv.FormatFloat(*r.Band, 'f', -1, 64))
	}
	if len(r.Classes) > 0 {
		cs := make([]string, len(r.Classes))
		for i, c := range r.Classes {
			cs[i] = yamlScalar(c)
		}
		fmt.Fprintf(&b, "    classes: [%s]\n", strings.Join(cs, ", "))
	}
	return b.String()
}

func points(ps [][2]float64) string {
	s := make([]string, len(ps))
	for i, p := range ps {
		s[i] = "[" + strconv.FormatFloat(round4(p[0]), 'f', -1, 64) + ", " + strconv.FormatFloat(round4(p[1]), 'f', -1, 64) + "]"
	}
	return "[" + strings.Join(s, ", ") + "]"
}

func round4(v float64) float64 {
	f, _ := strconv.ParseFloat(strconv.FormatFloat(v, 'f', 4, 64), 64)
	return f
}

// yamlScalar quotes a string when plain YAML would read it as something
// else.
func yamlScalar(s string) string {
	var n yaml.Node
	n.SetString(s)
	out, err := yaml.Marshal(&n)
	if err != nil {
		return strconv.Quote(s)
	}
	return strings.TrimSuffix(string(out), "\n")
}

// ReplaceRules returns the site file data with the rules of one source
// replaced by rules (which are given that source), the other sources' rules
// kept in place. Comments elsewhere in the file are kept; comments inside
// the replaced rules are not (the editor does not know where they belong).
// It also returns the position of each new rule in the file's rules list.
func ReplaceRules(data []byte, source string, rules []Rule) ([]byte, []int, error) {
	var doc yaml.Node
	if err := yaml.NewDecoder(bytes.NewReader(data)).Decode(&doc); err != nil && !errors.Is(err, io.EOF) {
		return nil, nil, fmt.Errorf("read site file: %w", err)
	}
	if len(doc.Content) == 0 || doc.Content[0].Kind != yaml.MappingNode {
		return nil, nil, errors.New("the site file is not a mapping of sections")
	}
	root := doc.Content[0]
	var seq *yaml.Node
	for i := 0; i+1 < len(root.Content); i += 2 {
		if root.Content[i].Value == "rules" {
			seq = root.Content[i+1]
		}
	}
	if seq == nil {
		root.Content = append(root.Content, &yaml.Node{Kind: yaml.ScalarNode, Value: "rules"}, &yaml.Node{Kind: yaml.SequenceNode})
		seq = root.Content[len(root.Content)-1]
	}
	if seq.Kind != yaml.SequenceNode {
		if seq.Kind == yaml.ScalarNode && (seq.Tag == "!!null" || seq.Value == "") {
			*seq = yaml.Node{Kind: yaml.SequenceNode}
		} else {
			return nil, nil, fmt.Errorf("rules at line %d is not a list", seq.Line)
		}
	}
	// Keep other sources' rules; the edited source's rules go where its
	// first rule was (or at the end).
	var kept []*yaml.Node
	at := -1
	for _, n := range seq.Content {
		if ruleSource(n) == source {
			if at < 0 {
				at = len(kept)
			}
			continue
		}
		kept = append(kept, n)
	}
	if at < 0 {
		at = len(kept)
	}
	var fresh yaml.Node
	for i := range rules {
		rules[i].Source = source
	}
	if err := yaml.Unmarshal([]byte(RulesYAML(rules)), &fresh); err != nil {
		return nil, nil, fmt.Errorf("write rules: %w", err)
	}
	newNodes := fresh.Content[0].Content[1].Content
	for _, n := range newNodes {
		setFlow(n)
	}
	seq.Content = append(append(append([]*yaml.Node{}, kept[:at]...), newNodes...), kept[at:]...)
	seq.Style = 0
	pos := make([]int, len(rules))
	for i := range pos {
		pos[i] = at + i
	}
	var out bytes.Buffer
	enc := yaml.NewEncoder(&out)
	enc.SetIndent(2)
	if err := enc.Encode(&doc); err != nil {
		return nil, nil, fmt.Errorf("write site file: %w", err)
	}
	return out.Bytes(), pos, nil
}

// setFlow writes point lists and class lists on one line, as people write
// them.
func setFlow(rule *yaml.Node) {
	for i := 0; i+1 < len(rule.Content); i += 2 {
		switch rule.Content[i].Value {
		case "line", "zone", "classes":
			setFlowAll(rule.Content[i+1])
		}
	}
}

func setFlowAll(n *yaml.Node) {
	n.Style = yaml.FlowStyle
	for _, c := range n.Content {
		setFlowAll(c)
	}
}

func ruleSource(n *yaml.Node) string {
	for i := 0; i+1 < len(n.Content); i += 2 {
		if n.Content[i].Value == "source" {
			return n.Content[i+1].Value
		}
	}
	return ""
}

// WriteFileAtomic replaces path with data: written to a temporary file in
// the same folder, synced, then renamed over it, so a reader never sees half
// a file. The file's permissions are kept.
func WriteFileAtomic(path string, data []byte) error {
	mode := os.FileMode(0o644)
	if st, err := os.Stat(path); err == nil {
		mode = st.Mode().Perm()
	}
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*")
	if err != nil {
		return err
	}
	defer os.Remove(tmp.Name())
	if _, err := tmp.Write(data); err != nil {
		tmp.Close()
		return err
	}
	if err := tmp.Chmod(mode); err != nil {
		tmp.Close()
		return err
	}
	if err := tmp.Sync(); err != nil {
		tmp.Close()
		return err
	}
	if err := tmp.Close(); err != nil {
		return err
	}
	return os.Rename(tmp.Name(), path)
}
