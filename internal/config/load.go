package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"reflect"
	"sort"
	"strconv"
	"strings"
	"time"

	"gopkg.in/yaml.v3"
)

// FieldError is one problem in a site file, located by file, line and key path.
type FieldError struct {
	File string
	Line int    // 0 when unknown
	Path string // e.g. "sources[0].fps"; "" for the whole file
	Msg  string
}

func (e FieldError) Error() string {
	var b strings.Builder
	if e.File != "" {
		b.WriteString(e.File)
		if e.Line > 0 {
			fmt.Fprintf(&b, ":%d", e.Line)
		}
		b.WriteString(": ")
	}
	if e.Path != "" {
		b.WriteString(e.Path)
		b.WriteString(": ")
	}
	b.WriteString(e.Msg)
	return b.String()
}

// Errors is every problem found in one site file, in file order.
type Errors []FieldError

func (es Errors) Error() string {
	parts := make([]string, len(es))
	for i, e := range es {
		parts[i] = e.Error()
	}
	return strings.Join(parts, "\n")
}

// ErrInvalid is wrapped by every error Load returns for a bad site file, so
// callers can tell bad input (exit code 2) from a failure while running.
var ErrInvalid = errors.New("invalid site config")

// Is lets errors.Is(err, ErrInvalid) match Errors.
func (es Errors) Is(target error) bool { return target == ErrInvalid }

// Is lets errors.Is(err, ErrInvalid) match a FieldError.
func (e FieldError) Is(target error) bool { return target == ErrInvalid }

// lineIndex maps a key path to the line it was written on.
type lineIndex map[string]int

// Load reads, decodes strictly and validates a site file, running checks
// with its own validation. Every error wraps ErrInvalid and names the file,
// line and key.
func Load(path string, checks ...Check) (*Config, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, FieldError{File: path, Msg: fmt.Sprintf("cannot read site file: %v", unwrapPathErr(err))}
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxFileBytes+1))
	if err != nil {
		return nil, FieldError{File: path, Msg: fmt.Sprintf("cannot read site file: %v", err)}
	}
	return Parse(path, data, checks...)
}

func unwrapPathErr(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

// Parse decodes and validates a site file held in memory; name is used in errors
// and relative paths are resolved against its folder.
func Parse(name string, data []byte, checks ...Check) (*Config, error) {
	if len(data) > MaxFileBytes {
		return nil, FieldError{File: name, Msg: fmt.Sprintf("the site file is over the limit of %d bytes", MaxFileBytes)}
	}
	var doc yaml.Node
	dec := yaml.NewDecoder(bytes.NewReader(data))
	if err := dec.Decode(&doc); err != nil && !errors.Is(err, io.EOF) {
		return nil, yamlSyntaxError(name, err)
	}
	if len(doc.Content) == 0 {
		return nil, FieldError{File: name, Msg: "file is empty"}
	}
	// Aliases are refused before anything follows them: expanding nested
	// aliases costs time and memory exponential in the file's size.
	if n := findAlias(doc.Content[0]); n != nil {
		return nil, FieldError{File: name, Line: n.Line, Msg: fmt.Sprintf("YAML aliases (*%s) are not supported; write the value out", n.Value)}
	}
	w := walker{file: name, lines: lineIndex{}}
	w.walk(doc.Content[0], reflect.TypeOf(Config{}), "", doc.Content[0].Line)
	if len(w.errs) > 0 {
		return nil, w.errs
	}
	cfg := Defaults()
	if err := doc.Content[0].Decode(&cfg); err != nil {
		return nil, FieldError{File: name, Msg: fmt.Sprintf("cannot decode: %v", err)}
	}
	cfg.File = name
	cfg.lines = w.lines
	cfg.fillRuleDefaults()
	cfg.fillSourceDefaults()
	cfg.fillTrackerDefaults()
	serrs := cfg.resolveSecrets()
	if err := cfg.Validate(checks...); err != nil || len(serrs) > 0 {
		var verrs Errors
		if err != nil {
			verrs = err.(Errors)
		}
		return nil, append(serrs, verrs...)
	}
	return &cfg, nil
}

// findAlias returns the first alias node in document order, or nil. Anchors
// alone are harmless and allowed.
func findAlias(n *yaml.Node) *yaml.Node {
	if n.Kind == yaml.AliasNode {
		return n
	}
	for _, c := range n.Content {
		if a := findAlias(c); a != nil {
			return a
		}
	}
	return nil
}

// yamlSyntaxError turns "yaml: line 3: mapping values are not allowed" into
// "file:3: mapping values are not allowed".
func yamlSyntaxError(name string, err error) error {
	msg := strings.TrimPrefix(err.Error(), "yaml: ")
	line := 0
	if rest, ok := strings.CutPrefix(msg, "line "); ok {
		if i := strings.Index(rest, ": "); i > 0 {
			if n, convErr := strconv.Atoi(rest[:i]); convErr == nil {
				line, msg = n, rest[i+2:]
			}
		}
	}
	return FieldError{File: name, Line: line, Msg: "malformed YAML: " + msg}
}

// walker checks the YAML tree against the Go types before decoding, so that
// unknown keys and wrong value types are reported with their path and line.
type walker struct {
	file  string
	lines lineIndex
	errs  Errors
}

var durationType = reflect.TypeOf(Duration{})

func (w *walker) fail(line int, path, format string, args ...any) {
	w.errs = append(w.errs, FieldError{File: w.file, Line: line, Path: path, Msg: fmt.Sprintf(format, args...)})
}

func (w *walker) walk(n *yaml.Node, t reflect.Type, path string, line int) {
	if n.Line > 0 {
		line = n.Line
	}
	if path != "" {
		if _, ok := w.lines[path]; !ok {
			w.lines[path] = line
		}
	}
	if n.Kind == yaml.ScalarNode && n.Tag == "!!null" {
		return
	}
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	if t == durationType {
		if n.Kind != yaml.ScalarNode {
			w.fail(line, path, "want a duration such as \"10s\"")
			return
		}
		if _, err := time.ParseDuration(n.Value); err != nil {
			w.fail(line, path, "want a duration such as \"10s\" (found %q)", n.Value)
		}
		return
	}
	switch t.Kind() {
	case reflect.Struct:
		if n.Kind != yaml.MappingNode {
			w.fail(line, path, "want a mapping of keys (found %s)", describe(n))
			return
		}
		fields, names := yamlFields(t)
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			sub := join(path, k.Value)
			f, ok := fields[k.Value]
			if !ok {
				w.fail(k.Line, sub, "unknown key (known keys: %s)", strings.Join(names, ", "))
				continue
			}
			w.lines[sub] = k.Line
			w.walk(v, f.Type, sub, k.Line)
		}
	case reflect.Map:
		if n.Kind != yaml.MappingNode {
			w.fail(line, path, "want a mapping (found %s)", describe(n))
			return
		}
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			sub := join(path, k.Value)
			w.lines[sub] = k.Line
			w.walk(v, t.Elem(), sub, k.Line)
		}
	case reflect.Slice, reflect.Array:
		if n.Kind != yaml.SequenceNode {
			w.fail(line, path, "want a list (found %s)", describe(n))
			return
		}
		if t.Kind() == reflect.Array && len(n.Content) != t.Len() {
			w.fail(line, path, "want a list of %d values (found %d)", t.Len(), len(n.Content))
			return
		}
		for i, c := range n.Content {
			w.walk(c, t.Elem(), fmt.Sprintf("%s[%d]", path, i), line)
		}
	case reflect.String:
		if n.Kind != yaml.ScalarNode {
			w.fail(line, path, "want a text value (found %s)", describe(n))
		}
	case reflect.Bool:
		if n.Kind != yaml.ScalarNode || n.Tag != "!!bool" {
			w.fail(line, path, "want true or false (found %s)", describe(n))
		}
	case reflect.Int, reflect.Int64:
		if n.Kind != yaml.ScalarNode || n.Tag != "!!int" {
			w.fail(line, path, "want a whole number (found %s)", describe(n))
		}
	case reflect.Float64:
		if n.Kind != yaml.ScalarNode || (n.Tag != "!!int" && n.Tag != "!!float") {
			w.fail(line, path, "want a number (found %s)", describe(n))
		}
	}
}

func describe(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	default:
		return strconv.Quote(n.Value)
	}
}

func join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

// yamlFields maps YAML keys to struct fields and lists the keys sorted.
func yamlFields(t reflect.Type) (map[string]reflect.StructField, []string) {
	m := map[string]reflect.StructField{}
	var names []string
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		tag := strings.Split(f.Tag.Get("yaml"), ",")[0]
		if tag == "" || tag == "-" {
			continue
		}
		m[tag] = f
		names = append(names, tag)
	}
	sort.Strings(names)
	return m, names
}

// UnmarshalYAML reads a duration string; the walker has checked it already.
func (d *Duration) UnmarshalYAML(n *yaml.Node) error {
	v, err := time.ParseDuration(n.Value)
	if err != nil {
		return err
	}
	d.Duration = v
	return nil
}

// MarshalYAML writes the duration as a string.
func (d Duration) MarshalYAML() (any, error) { return d.String(), nil }

// Resolve makes a path from the site file absolute-or-cwd-relative: relative
// paths are taken from the site file's folder.
func (c *Config) Resolve(p string) string {
	if p == "" || filepath.IsAbs(p) || c.File == "" {
		return p
	}
	return filepath.Join(filepath.Dir(c.File), p)
}

// Line reports the line a key path was written on (0 when unknown).
func (c *Config) Line(path string) int {
	for p := path; p != ""; {
		if l, ok := c.lines[p]; ok {
			return l
		}
		i := strings.LastIndexAny(p, ".[")
		if i < 0 {
			break
		}
		p = p[:i]
	}
	return 0
}

// Errorf builds a located error for a key path of this config; the pipeline
// uses it for problems found when a source or model is opened.
func (c *Config) Errorf(path, format string, args ...any) FieldError {
	return FieldError{File: c.File, Line: c.Line(path), Path: path, Msg: fmt.Sprintf(format, args...)}
}
