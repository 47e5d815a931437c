package main

import (
	"bufio"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// TestTrackPublicDetections: `tallyd track` with its default settings on
// SORT's published Faster R-CNN detections for TUD-Campus
// (../shared/reference/mot/public-dets, README there), scored by `tallyd
// score` against the MOT15 ground truth.
func TestTrackPublicDetections(t *testing.T) {
	det := motRefPath(t, "public-dets", "TUD-Campus", "det.txt")
	gt := motRefPath(t, "TUD-Campus", "gt.txt")
	dir := t.TempDir()
	tracks := filepath.Join(dir, "TUD-Campus.txt")
	// 25 frames/s, 640x480 (MOT15 seqinfo, from memory).
	if _, e, code := cli(t, "track", "--detections", det, "--out", tracks, "--fps", "25", "--frame-size", "640x480"); code != 0 {
		t.Fatalf("track exit %d: %s", code, e)
	}
	out, e, code := cli(t, "score", "--truth", gt, "--tracks", tracks, "--json")
	if code != 0 {
		t.Fatalf("score exit %d: %s", code, e)
	}
	m := scoreLines(t, out)[0]
	t.Logf("TUD-Campus, defaults: MOTA %.3f IDF1 %.3f HOTA %.3f FP %d FN %d IDsw %d", m.MOTA, m.IDF1, m.HOTA,
		m.Counts.FalsePositives, m.Counts.Misses, m.Counts.IDSwitches)
	// SORT (Bewley et al., "Simple Online and Realtime Tracking", ICIP
	// 2016) on the same detections: MOTA 0.627 (FP 15, FN 113, IDsw 6),
	// github.com/abewley/sort README "Main Results" (public-dets/README.md).
	const sortMOTA = 0.627
	if m.MOTA < 0.60 || m.IDF1 < 0.65 {
		t.Errorf("MOTA %.3f IDF1 %.3f, want at least 0.60 and 0.65 (SORT published MOTA %.3f)", m.MOTA, m.IDF1, sortMOTA)
	}
	checkInside(t, tracks, 640, 480)

	// With the gaps interpolated: more boxes, never outside the frame, and
	// the same identities.
	filled := filepath.Join(dir, "filled.txt")
	if _, e, code := cli(t, "track", "--detections", det, "--out", filled, "--fps", "25", "--frame-size", "640x480", "--interpolate"); code != 0 {
		t.Fatalf("track --interpolate exit %d: %s", code, e)
	}
	out, _, _ = cli(t, "score", "--truth", gt, "--tracks", filled, "--json")
	f := scoreLines(t, out)[0]
	t.Logf("TUD-Campus, --interpolate: MOTA %.3f IDF1 %.3f", f.MOTA, f.IDF1)
	if f.Counts.TrackBoxes <= m.Counts.TrackBoxes || f.MOTA < m.MOTA {
		t.Errorf("interpolated: %d boxes MOTA %.3f, plain %d boxes MOTA %.3f", f.Counts.TrackBoxes, f.MOTA, m.Counts.TrackBoxes, m.MOTA)
	}
	checkInside(t, filled, 640, 480)
}

func checkInside(t *testing.T, path string, w, h float64) {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		c := strings.Split(sc.Text(), ",")
		v := make([]float64, 4)
		for i := range v {
			if v[i], err = strconv.ParseFloat(c[2+i], 64); err != nil {
				t.Fatalf("%s:%d: %v", path, line, err)
			}
		}
		if v[0] < 0 || v[1] < 0 || v[0]+v[2] > w+1e-9 || v[1]+v[3] > h+1e-9 {
			t.Fatalf("%s:%d: box %v outside the %vx%v frame", path, line, v, w, h)
		}
	}
}

// TestTrackFlagErrors: bad tracker and output flags are usage errors that
// name the flag.
func TestTrackFlagErrors(t *testing.T) {
	dir := t.TempDir()
	det := filepath.Join(dir, "det.txt")
	if err := os.WriteFile(det, []byte("1,-1,10,20,30,40,0.9,-1,-1,-1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "o.txt")
	for _, tt := range []struct {
		args []string
		want string
	}{
		{[]string{"--box", "raw"}, `usage: --box: want filtered or detection (found "raw")`},
		{[]string{"--frame-size", "640"}, `usage: --frame-size: want WIDTHxHEIGHT in pixels, each 1 to 100000 (found "640")`},
		{[]string{"--scores", "median"}, `usage: tracker settings: bytetrack.scores.mode: want auto, fixed, warmup (found "median")`},
		{[]string{"--lost-frames", "-1"}, "usage: tracker settings: bytetrack.lost_frames: must be within [0, 108000] (found -1)"},
	} {
		_, e, code := cli(t, append([]string{"track", "--detections", det, "--out", out}, tt.args...)...)
		if want := "tallyd track: " + tt.want + "\n"; code != exitBadInput || e != want {
			t.Errorf("%v: exit %d, stderr %q, want %q", tt.args, code, e, want)
		}
	}
}

// TestTrackerSiteErrors: the new tracker keys of a site file are checked
// with the tracker's own rules and reported at their line.
func TestTrackerSiteErrors(t *testing.T) {
	dir := t.TempDir()
	site := filepath.Join(dir, "site.yaml")
	y := `site: s
sources:
  - {id: walkway, scene: {seed: 1}}
tracker:
  bytetrack:
    lost_frames: -3
    scores:
      mode: median
      new_quantile: 2
`
	if err := os.WriteFile(site, []byte(y), 0o644); err != nil {
		t.Fatal(err)
	}
	_, e, code := cli(t, "check", "-c", site)
	for _, want := range []string{
		site + ":6: tracker.bytetrack.lost_frames: must be within [0, 108000] (found -3)",
		site + `:8: tracker.bytetrack.scores.mode: want auto, fixed, warmup (found "median")`,
		site + ":9: tracker.bytetrack.scores.new_quantile: must be within [0, 1] (found 2)",
	} {
		if code != exitBadInput || !strings.Contains(e, want) {
			t.Errorf("exit %d, stderr %q; want it to contain %q", code, e, want)
		}
	}
}
