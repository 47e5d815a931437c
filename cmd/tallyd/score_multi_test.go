package main

import (
	"encoding/csv"
	"encoding/json"
	"errors"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"tallyd/track/eval"
)

// motRef is the shared MOT reference data (../shared/reference/mot,
// README.md there), read in place.
const motRef = "../../../shared/reference/mot"

func motRefPath(t *testing.T, parts ...string) string {
	t.Helper()
	p := filepath.Join(append([]string{motRef}, parts...)...)
	if _, err := os.Stat(p); err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			t.Skipf("shared MOT reference data absent: %s", p)
		}
		t.Fatal(err)
	}
	return p
}

// scoreLines decodes the lines of `score --json`, refusing unknown keys.
func scoreLines(t *testing.T, out string) []eval.Summary {
	t.Helper()
	var res []eval.Summary
	for _, line := range strings.Split(strings.TrimSpace(out), "\n") {
		d := json.NewDecoder(strings.NewReader(line))
		d.DisallowUnknownFields()
		var s eval.Summary
		if err := d.Decode(&s); err != nil {
			t.Fatalf("%v: %s", err, line)
		}
		res = append(res, s)
	}
	return res
}

// TestScoreCombinedLifT: `score` over the 21 MOT17 train sequences of the
// shared Lif_T reference, given as --truth/--tracks pairs, prints each
// sequence and then the combined row, which must be the COMBINED row of
// MOT17-train-Lif_T/expected_trackeval.csv (TrackEval's combine_sequences:
// counts summed, ratios recomputed; README §5a/§5b there) to 1e-6.
func TestScoreCombinedLifT(t *testing.T) {
	base := motRefPath(t, "MOT17-train-Lif_T")
	var args []string
	var names []string
	for _, nn := range []string{"02", "04", "05", "09", "10", "11", "13"} {
		for _, v := range []string{"DPM", "FRCNN", "SDP"} {
			dir := filepath.Join(base, "MOT17-"+nn)
			name := "MOT17-" + nn + "-" + v
			args = append(args, "--truth", filepath.Join(dir, "gt.txt.gz"), "--tracks", filepath.Join(dir, "Lif_T-"+name+".txt.gz"))
			names = append(names, "Lif_T-"+name)
		}
	}
	out, e, code := cli(t, append([]string{"score", "--json"}, args...)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, e)
	}
	rows := scoreLines(t, out)
	if len(rows) != 22 {
		t.Fatalf("%d lines, want 21 sequences and COMBINED", len(rows))
	}
	for i, n := range names {
		if rows[i].Sequence != n {
			t.Errorf("line %d: sequence %q, want %q", i+1, rows[i].Sequence, n)
		}
	}
	c := rows[21]
	if c.Sequence != "COMBINED" {
		t.Fatalf("last line is %q, want COMBINED", c.Sequence)
	}
	want := expectedRow(t, filepath.Join(base, "expected_trackeval.csv"), "COMBINED")
	const src = "MOT17-train-Lif_T/expected_trackeval.csv row COMBINED (TrackEval)"
	for _, f := range []struct {
		col string
		got float64
	}{
		{"MOTA", c.MOTA}, {"MOTP", c.MOTP}, {"IDF1", c.IDF1}, {"IDP", c.IDP}, {"IDR", c.IDR},
		{"HOTA", c.HOTA}, {"DetA", c.DetA}, {"AssA", c.AssA},
		{"CLR_TP", float64(c.Counts.Matches)}, {"CLR_FP", float64(c.Counts.FalsePositives)}, {"CLR_FN", float64(c.Counts.Misses)},
		{"IDSW", float64(c.Counts.IDSwitches)}, {"Frag", float64(c.Counts.Fragmentations)},
		{"GT_Dets", float64(c.Counts.TruthBoxes)}, {"Dets", float64(c.Counts.TrackBoxes)},
		{"GT_IDs", float64(c.Trajectories.Truth)}, {"MT", float64(c.Trajectories.MostlyTracked)},
		{"PT", float64(c.Trajectories.PartlyTracked)}, {"ML", float64(c.Trajectories.MostlyLost)},
	} {
		if w := want[f.col]; !(math.Abs(f.got-w) <= 1e-6) {
			t.Errorf("COMBINED %s = %.12g, want %.12g ±1e-6 (%s)", f.col, f.got, w, src)
		}
	}

	// The table prints the same rows.
	out, e, code = cli(t, append([]string{"score"}, args...)...)
	if code != 0 || !strings.Contains(out, "COMBINED") || strings.Count(out, "\n") != 23 {
		t.Errorf("table: exit %d, %s\n%s", code, e, out)
	}
}

// expectedRow reads one row of an expected_trackeval.csv: column → value.
func expectedRow(t *testing.T, path, seq string) map[string]float64 {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	for _, rec := range recs[1:] {
		if rec[0] != seq {
			continue
		}
		row := map[string]float64{}
		for i, col := range recs[0][1:] {
			if row[col], err = strconv.ParseFloat(rec[i+1], 64); err != nil {
				t.Fatalf("%s: %s %s: %v", path, seq, col, err)
			}
		}
		return row
	}
	t.Fatalf("%s: no row %s", path, seq)
	return nil
}

// TestScoreDir: a folder laid out as <seq>/gt/gt.txt (+ seqinfo.ini) and
// <seq>.txt is scored sequence by sequence, in name order, then combined.
func TestScoreDir(t *testing.T) {
	base := motRefPath(t, "MOT17-train-Lif_T")
	dir := t.TempDir()
	// Links to the shared files, never copies.
	for _, nn := range []string{"05", "09"} {
		seq := "MOT17-" + nn + "-FRCNN"
		src := filepath.Join(base, "MOT17-"+nn)
		abs, err := filepath.Abs(src)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.MkdirAll(filepath.Join(dir, seq, "gt"), 0o755); err != nil {
			t.Fatal(err)
		}
		for _, l := range [][2]string{
			{filepath.Join(abs, "gt.txt.gz"), filepath.Join(dir, seq, "gt", "gt.txt.gz")},
			{filepath.Join(abs, "seqinfo-FRCNN.ini"), filepath.Join(dir, seq, "seqinfo.ini")},
			{filepath.Join(abs, "Lif_T-"+seq+".txt.gz"), filepath.Join(dir, seq+".txt.gz")},
		} {
			if err := os.Symlink(l[0], l[1]); err != nil {
				t.Fatal(err)
			}
		}
	}
	out, e, code := cli(t, "score", "--dir", dir, "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, e)
	}
	rows := scoreLines(t, out)
	want := expectedCSVRows(t, filepath.Join(base, "expected_trackeval.csv"))
	if len(rows) != 3 || rows[0].Sequence != "MOT17-05-FRCNN" || rows[1].Sequence != "MOT17-09-FRCNN" || rows[2].Sequence != "COMBINED" {
		t.Fatalf("rows %+v", rows)
	}
	var fp, fn int
	for _, r := range rows[:2] {
		w := want[r.Sequence]
		// Per-sequence rows of expected_trackeval.csv (TrackEval).
		if math.Abs(r.MOTA-w["MOTA"]) > 1e-6 || math.Abs(r.HOTA-w["HOTA"]) > 1e-6 || float64(r.Counts.IDSwitches) != w["IDSW"] {
			t.Errorf("%s: MOTA %v HOTA %v IDsw %d, want %v %v %v (expected_trackeval.csv)", r.Sequence, r.MOTA, r.HOTA, r.Counts.IDSwitches, w["MOTA"], w["HOTA"], w["IDSW"])
		}
		fp, fn = fp+r.Counts.FalsePositives, fn+r.Counts.Misses
	}
	if c := rows[2].Counts; c.FalsePositives != fp || c.Misses != fn {
		t.Errorf("combined FP %d FN %d, want the sums %d %d", c.FalsePositives, c.Misses, fp, fn)
	}
}

func expectedCSVRows(t *testing.T, path string) map[string]map[string]float64 {
	t.Helper()
	out := map[string]map[string]float64{}
	for _, s := range []string{"MOT17-05-FRCNN", "MOT17-09-FRCNN"} {
		out[s] = expectedRow(t, path, s)
	}
	return out
}

// TestScoreErrors: bad input names the file and the line (or the flag),
// never the whole line, with exit code 2.
func TestScoreErrors(t *testing.T) {
	dir := t.TempDir()
	write := func(name, text string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	good := write("gt.txt", "1,1,10,20,30,40,1,-1,-1,-1\n2,1,10,20,30,40,1,-1,-1,-1\n")
	dup := write("dup.txt", "1,1,10,20,30,40,1,-1,-1,-1\n\n1,2,10,20,30,40,1,-1,-1,-1\n1,2,50,20,30,40,1,-1,-1,-1\n")
	bad := write("bad.txt", "1,1,10,20,30,40,1,-1,-1,-1\n2,1,10,twenty,30,40,1,-1,-1,-1\n")
	empty := t.TempDir()
	noTracks := t.TempDir()
	if err := os.MkdirAll(filepath.Join(noTracks, "seqA", "gt"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(noTracks, "seqA", "gt", "gt.txt"), []byte("1,1,10,20,30,40,1,-1,-1,-1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tt := range []struct {
		name string
		args []string
		want string
	}{
		{"id twice in a frame", []string{"--truth", good, "--tracks", dup},
			dup + ":4: frame 1, id 2: want each id at most once per frame (found 2 boxes)"},
		{"malformed line", []string{"--truth", good, "--tracks", bad},
			bad + `:2: column 4 (top): want a number (found "twenty")`},
		{"unpaired", []string{"--truth", good, "--truth", good, "--tracks", good},
			"usage: --truth and --tracks come in pairs (found 2 --truth and 1 --tracks)"},
		{"frames with several", []string{"--truth", good, "--tracks", good, "--truth", good, "--tracks", good, "--frames", "3"},
			"usage: --frames: only with one sequence (found 2 sequences)"},
		{"dir and pairs", []string{"--dir", dir, "--truth", good, "--tracks", good},
			"usage: --dir: give either --dir or --truth/--tracks pairs, not both"},
		{"empty dir", []string{"--dir", empty}, empty + ": no sequence found (want <seq>/gt/gt.txt beside <seq>.txt)"},
		{"dir without tracks", []string{"--dir", noTracks},
			noTracks + ": no tracks for sequence seqA (looked for " + filepath.Join(noTracks, "seqA.txt") + " and " + filepath.Join(noTracks, "seqA.txt") + ".gz)"},
	} {
		t.Run(tt.name, func(t *testing.T) {
			out, e, code := cli(t, append([]string{"score"}, tt.args...)...)
			if want := "tallyd score: " + tt.want + "\n"; code != exitBadInput || out != "" || e != want {
				t.Errorf("exit %d, stdout %q\nstderr %q\n  want %q", code, out, e, want)
			}
		})
	}
}
