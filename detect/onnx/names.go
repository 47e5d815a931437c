package onnx

import (
	"bufio"
	"bytes"
	"fmt"
	"os"
	"sort"
	"strconv"
	"strings"
)

// readNames reads a class names file: one name per line in the model's class
// order; blank lines at the end are ignored, surrounding spaces trimmed.
func readNames(path string) ([]string, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	var names []string
	sc := bufio.NewScanner(bytes.NewReader(data))
	for sc.Scan() {
		names = append(names, strings.TrimSpace(sc.Text()))
	}
	for len(names) > 0 && names[len(names)-1] == "" {
		names = names[:len(names)-1]
	}
	if len(names) == 0 {
		return nil, fmt.Errorf("no class names in %q", path)
	}
	for i, n := range names {
		if n == "" {
			return nil, fmt.Errorf("%q line %d: class name is empty", path, i+1)
		}
	}
	return names, nil
}

// metadataNames reads class names from a model's "names" metadata entry as
// written by common YOLO exporters: a Python dict literal such as
// {0: 'person', 1: 'bicycle'} (indices from 0, without gaps). It reports
// false when the entry is absent or not in that form.
func metadataNames(meta map[string]string) ([]string, bool) {
	s, ok := meta["names"]
	if !ok {
		return nil, false
	}
	s = strings.TrimSpace(s)
	if !strings.HasPrefix(s, "{") || !strings.HasSuffix(s, "}") {
		return nil, false
	}
	body := strings.TrimSpace(s[1 : len(s)-1])
	byIndex := map[int]string{}
	for body != "" {
		colon := strings.IndexByte(body, ':')
		if colon < 0 {
			return nil, false
		}
		idx, err := strconv.Atoi(strings.TrimSpace(body[:colon]))
		if err != nil || idx < 0 {
			return nil, false
		}
		rest := strings.TrimSpace(body[colon+1:])
		if rest == "" || (rest[0] != '\'' && rest[0] != '"') {
			return nil, false
		}
		end := strings.IndexByte(rest[1:], rest[0])
		if end < 0 {
			return nil, false
		}
		byIndex[idx] = rest[1 : end+1]
		body = strings.TrimSpace(rest[end+2:])
		body = strings.TrimSpace(strings.TrimPrefix(body, ","))
	}
	if len(byIndex) == 0 {
		return nil, false
	}
	keys := make([]int, 0, len(byIndex))
	for k := range byIndex {
		keys = append(keys, k)
	}
	sort.Ints(keys)
	names := make([]string, len(keys))
	for i, k := range keys {
		if k != i || byIndex[k] == "" {
			return nil, false
		}
		names[i] = byIndex[k]
	}
	return names, true
}

// indexNames is the fallback when neither a names file nor metadata names
// the classes: "class0", "class1", ...
func indexNames(n int) []string {
	names := make([]string, n)
	for i := range names {
		names[i] = "class" + strconv.Itoa(i)
	}
	return names
}
