package motfmt

import (
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"io"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// refDir holds the shared MOTChallenge reference data (see its README.md).
const refDir = "../../../shared/reference/mot"

func needRef(t testing.TB, rel string) string {
	t.Helper()
	p := filepath.Join(refDir, rel)
	if _, err := os.Stat(p); err != nil {
		t.Skipf("reference data not available: %v", err)
	}
	return p
}

func TestReadRows(t *testing.T) {
	tests := []struct {
		name string
		in   string
		want []Row
	}{
		{"six columns", "3,-1,10,20,30,40\n",
			[]Row{{Frame: 3, ID: -1, X: 10, Y: 20, W: 30, H: 40, Conf: -1, Class: -1, Visibility: -1}}},
		{"seven columns", "1,-1,1.5,-2.25,3,4,0.87",
			[]Row{{Frame: 1, ID: -1, X: 1.5, Y: -2.25, W: 3, H: 4, Conf: 0.87, Class: -1, Visibility: -1}}},
		{"eight columns", "1,5,1,2,3,4,1,3",
			[]Row{{Frame: 1, ID: 5, X: 1, Y: 2, W: 3, H: 4, Conf: 1, Class: 3, Visibility: -1}}},
		{"MOT17 ground truth", "12,7,912,484,97,109,0,7,0.84158",
			[]Row{{Frame: 12, ID: 7, X: 912, Y: 484, W: 97, H: 109, Conf: 0, Class: 7, Visibility: 0.84158}}},
		{"MOT15 world coordinates ignored", "2,3,1,2,3,4,-1,12.5,-3,0",
			[]Row{{Frame: 2, ID: 3, X: 1, Y: 2, W: 3, H: 4, Conf: -1, Class: -1, Visibility: -1}}},
		{"whole numbers written as decimals", "4.000000,2.0,1,2,3,4,1e0,1.0,1",
			[]Row{{Frame: 4, ID: 2, X: 1, Y: 2, W: 3, H: 4, Conf: 1, Class: 1, Visibility: 1}}},
		{"spaces, CRLF and blank lines", "\r\n 1 , 2 , 3 , 4 , 5 , 6 , 0.5\r\n\r\n\t\n2,2,3,4,5,6,1\r\n",
			[]Row{
				{Frame: 1, ID: 2, X: 3, Y: 4, W: 5, H: 6, Conf: 0.5, Class: -1, Visibility: -1},
				{Frame: 2, ID: 2, X: 3, Y: 4, W: 5, H: 6, Conf: 1, Class: -1, Visibility: -1},
			}},
		{"white space separated", "1 2 3 4 5 6 0.5",
			[]Row{{Frame: 1, ID: 2, X: 3, Y: 4, W: 5, H: 6, Conf: 0.5, Class: -1, Visibility: -1}}},
		{"zero size allowed", "1,1,0,0,0,0,1",
			[]Row{{Frame: 1, ID: 1, Conf: 1, Class: -1, Visibility: -1}}},
		{"large id kept exactly", "1,9007199254740993,0,0,1,1",
			[]Row{{Frame: 1, ID: 9007199254740993, W: 1, H: 1, Conf: -1, Class: -1, Visibility: -1}}},
		{"frame at MaxFrame", "10000000,1,0,0,1,1\n1e7,2,0,0,1,1",
			[]Row{
				{Frame: MaxFrame, ID: 1, W: 1, H: 1, Conf: -1, Class: -1, Visibility: -1},
				{Frame: MaxFrame, ID: 2, W: 1, H: 1, Conf: -1, Class: -1, Visibility: -1},
			}},
		{"empty input", "", nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := Read(strings.NewReader(tt.in), "x.txt")
			if err != nil {
				t.Fatalf("Read: %v", err)
			}
			if !reflect.DeepEqual(got, tt.want) {
				t.Errorf("Read =\n%+v\nwant\n%+v", got, tt.want)
			}
		})
	}
}

func TestReadErrors(t *testing.T) {
	tests := []struct {
		name, in, want string
	}{
		{"too few columns", "1,2,3\n1,2,3,4,5",
			`det.txt:1: want 6 to 10 columns, have 3 (found "1,2,3")`},
		{"too many columns", "1,1,1,1,1,1,1,1,1,1,1",
			`det.txt:1: want 6 to 10 columns, have 11 (found "1,1,1,1,1,1,1,1,1,1,1")`},
		{"error on a later line counts blank lines", "1,1,1,1,1,1\n\n1,1,1,1,1",
			`det.txt:3: want 6 to 10 columns, have 5 (found "1,1,1,1,1")`},
		{"non-numeric left", "1,1,abc,1,1,1",
			`det.txt:1: column 3 (left): want a number (found "abc")`},
		{"empty field", "1,1,1,1,1,1,",
			`det.txt:1: column 7 (conf): want a number (found "")`},
		{"NaN", "1,1,1,1,1,1,NaN",
			`det.txt:1: column 7 (conf): want a finite number (found "NaN")`},
		{"Inf", "1,1,1,1,1,-inf",
			`det.txt:1: column 6 (height): want a finite number (found "-inf")`},
		{"overflow", "1,1,1e999,1,1,1",
			`det.txt:1: column 3 (left): want a finite number (found "1e999")`},
		{"negative width", "1,1,1,1,-0.5,1",
			`det.txt:1: column 5 (width): want a non-negative number (found "-0.5")`},
		{"negative height", "1,1,1,1,1,-2",
			`det.txt:1: column 6 (height): want a non-negative number (found "-2")`},
		{"frame zero", "0,1,1,1,1,1",
			`det.txt:1: column 1 (frame): want a whole number from 1 to 10000000 (found "0")`},
		{"frame fractional", "1.5,1,1,1,1,1",
			`det.txt:1: column 1 (frame): want a whole number from 1 to 10000000 (found "1.5")`},
		{"frame negative", "-3,1,1,1,1,1",
			`det.txt:1: column 1 (frame): want a whole number from 1 to 10000000 (found "-3")`},
		// One such row made the scorer allocate 23 GB and the track command
		// loop 2e9 times before the limit.
		{"frame beyond MaxFrame", "1,1,1,1,1,1\n\n2000000000,1,1,1,1,1",
			`det.txt:3: column 1 (frame): want a whole number from 1 to 10000000 (found "2000000000")`},
		{"frame one beyond MaxFrame", "10000001,1,1,1,1,1",
			`det.txt:1: column 1 (frame): want a whole number from 1 to 10000000 (found "10000001")`},
		{"frame beyond MaxFrame in exponent form", "2e9,1,1,1,1,1",
			`det.txt:1: column 1 (frame): want a whole number from 1 to 10000000 (found "2e9")`},
		{"frame beyond int64", "1e300,1,1,1,1,1",
			`det.txt:1: column 1 (frame): want a whole number from 1 to 10000000 (found "1e300")`},
		{"id beyond int64", "1,1e19,1,1,1,1",
			`det.txt:1: column 2 (id): want a whole number (found "1e19")`},
		{"NaN width", "1,1,1,1,nan,1",
			`det.txt:1: column 5 (width): want a finite number (found "nan")`},
		{"infinite width", "1,1,1,1,+Inf,1",
			`det.txt:1: column 5 (width): want a finite number (found "+Inf")`},
		{"negative zero width is zero", "1,1,1,1,-0,1\n1,1,1,1,-1e-300,1",
			`det.txt:2: column 5 (width): want a non-negative number (found "-1e-300")`},
		{"id fractional", "1,2.5,1,1,1,1",
			`det.txt:1: column 2 (id): want a whole number (found "2.5")`},
		{"class fractional", "1,2,1,1,1,1,1,0.5,1",
			`det.txt:1: column 8 (class): want a whole number (found "0.5")`},
		{"world coordinate named in 10 columns", "1,2,1,1,1,1,1,-1,x,-1",
			`det.txt:1: column 9 (y): want a number (found "x")`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			rows, err := Read(strings.NewReader(tt.in), "det.txt")
			if err == nil {
				t.Fatalf("Read = %+v, want error %s", rows, tt.want)
			}
			if err.Error() != tt.want {
				t.Errorf("error\n got: %s\nwant: %s", err, tt.want)
			}
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Errorf("error %T is not a *ParseError", err)
			}
		})
	}
}

func TestReadLineTooLong(t *testing.T) {
	in := "1,1,1,1,1,1\n" + strings.Repeat(" ", MaxLineBytes+1) + "\n"
	_, err := Read(strings.NewReader(in), "big.txt")
	want := `big.txt:2: want a line shorter than 65536 bytes (found "…")`
	if err == nil || err.Error() != want {
		t.Fatalf("error = %v, want %s", err, want)
	}
	var pe *ParseError
	if !errors.As(err, &pe) {
		t.Errorf("error %T is not a *ParseError", err)
	}
	// A long line within the limit is read.
	ok := "1,1,1,1,1,1" + strings.Repeat(" ", MaxLineBytes-100) + "\n"
	if rows, err := Read(strings.NewReader(ok), "long.txt"); err != nil || len(rows) != 1 {
		t.Errorf("line of %d bytes: %d rows, error %v", len(ok), len(rows), err)
	}
}

// rowsReader serves n copies of one line without holding them in memory.
type rowsReader struct {
	line []byte
	n    int // lines left
	off  int // offset in the current line
}

func (r *rowsReader) Read(p []byte) (int, error) {
	k := 0
	for k < len(p) && r.n > 0 {
		c := copy(p[k:], r.line[r.off:])
		k += c
		if r.off += c; r.off == len(r.line) {
			r.off = 0
			r.n--
		}
	}
	if k == 0 {
		return 0, io.EOF
	}
	return k, nil
}

// TestReadTooManyRows reads as many rows as the limit allows, then one
// more. Reading MaxRows rows takes half a minute, so the test lowers the
// limit; the message is the same with MaxRows.
func TestReadTooManyRows(t *testing.T) {
	const limit = 1000
	rows, err := read(context.Background(), &rowsReader{line: []byte("1,1,1,1,1,1\n\n"), n: limit}, "many.txt", limit)
	if err != nil || len(rows) != limit {
		t.Fatalf("%d rows: read %d, error %v", limit, len(rows), err)
	}
	_, err = read(context.Background(), &rowsReader{line: []byte("7,1,1,1,1,1\n\n"), n: limit + 1}, "many.txt", limit)
	want := `many.txt:2001: want at most 1000 rows in a file (found "7,1,1,1,1,1")`
	if err == nil || err.Error() != want {
		t.Fatalf("error = %v, want %s", err, want)
	}
	var pe *ParseError
	if !errors.As(err, &pe) {
		t.Errorf("error %T is not a *ParseError", err)
	}
}

// ReadContext stops when its context is done, with an error naming the
// file and wrapping the context's.
func TestReadContextStops(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := ReadContext(ctx, &rowsReader{line: []byte("1,1,1,1,1,1\n"), n: MaxRows}, "det.txt")
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("error = %v, want context.Canceled", err)
	}
	if want := "read det.txt: interrupted at line 8192: context canceled"; err.Error() != want {
		t.Errorf("error = %v, want %s", err, want)
	}

	path := filepath.Join(t.TempDir(), "det.txt")
	if err := os.WriteFile(path, []byte(strings.Repeat("1,-1,1,2,3,4,0.5\n", 10000)), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadFileContext(ctx, path); !errors.Is(err, context.Canceled) {
		t.Errorf("ReadFileContext error = %v, want context.Canceled", err)
	}
	if rows, err := ReadFileContext(context.Background(), path); err != nil || len(rows) != 10000 {
		t.Errorf("ReadFileContext: %d rows, error %v", len(rows), err)
	}
}

// TestReadMOTChallengeFixture parses the 5-line loader fixture of
// py-motmetrics (motmetrics/data/iotest/motchallenge.txt): 10-column MOT15
// layout, no newline after the last line.
func TestReadMOTChallengeFixture(t *testing.T) {
	rows, err := ReadFile(needRef(t, "iotest/motchallenge.txt"))
	if err != nil {
		t.Fatal(err)
	}
	// Source: cheind/py-motmetrics motmetrics/tests/test_io.py,
	// test_load_motchallenge (commit 134131c4fc7c1148f871c81576ba8575118559ed),
	// as quoted in ../shared/reference/mot/README.md §6. That loader subtracts
	// 1 from left and top; this package keeps the file's values, so the
	// asserted tuples are compared after the same shift.
	asserted := [][9]float64{
		{1, 1, 398, 181, 121, 229, 1, -1, -1},
		{1, 2, 281, 200, 92, 184, 1, -1, -1},
		{2, 2, 268, 201, 87, 182, 1, -1, -1},
		{2, 3, 70, 150, 100, 284, 1, -1, -1},
		{2, 4, 199, 205, 55, 137, 1, -1, -1},
	}
	if len(rows) != len(asserted) {
		t.Fatalf("got %d rows, want %d", len(rows), len(asserted))
	}
	for i, r := range rows {
		got := [9]float64{float64(r.Frame), float64(r.ID), r.X - 1, r.Y - 1, r.W, r.H, r.Conf, float64(r.Class), r.Visibility}
		if got != asserted[i] {
			t.Errorf("row %d = %v, want %v", i, got, asserted[i])
		}
	}
}

// TestReadFileGzip reads MOT17 ground truth stored gzip-compressed and checks
// counts published with the reference data.
func TestReadFileGzip(t *testing.T) {
	rows, err := ReadFile(needRef(t, "MOT17-train-Lif_T/MOT17-02/gt.txt.gz"))
	if err != nil {
		t.Fatal(err)
	}
	// Source: ../shared/reference/mot/README.md §10 (30003 lines) and §5b
	// ("GT boxes per sequence: MOT17-02 18581 (the class-1 rows)").
	if len(rows) != 30003 {
		t.Errorf("got %d rows, want 30003", len(rows))
	}
	class1 := 0
	for _, r := range rows {
		if r.Class == 1 {
			class1++
		}
	}
	if class1 != 18581 {
		t.Errorf("got %d class-1 rows, want 18581", class1)
	}
}

func TestReadFileTUDCampus(t *testing.T) {
	dir := needRef(t, "TUD-Campus")
	// Source: ../shared/reference/mot/README.md §1/§10 (359 GT boxes, 222
	// tracker boxes) and §4a (71 frames, asserted by py-motmetrics).
	gt, err := ReadFile(filepath.Join(dir, "gt.txt"))
	if err != nil {
		t.Fatal(err)
	}
	res, err := ReadFile(filepath.Join(dir, "test.txt"))
	if err != nil {
		t.Fatal(err)
	}
	if len(gt) != 359 || len(res) != 222 {
		t.Errorf("got %d GT and %d tracker rows, want 359 and 222", len(gt), len(res))
	}
	last := 0
	for _, r := range gt {
		last = max(last, r.Frame)
	}
	if last != 71 {
		t.Errorf("last GT frame %d, want 71", last)
	}
}

func TestReadFileDetectsGzipByContent(t *testing.T) {
	dir := t.TempDir()
	var zbuf bytes.Buffer
	zw := gzip.NewWriter(&zbuf)
	zw.Write([]byte("1,-1,1,2,3,4,0.5\n"))
	zw.Close()
	want := []Row{{Frame: 1, ID: -1, X: 1, Y: 2, W: 3, H: 4, Conf: 0.5, Class: -1, Visibility: -1}}
	files := map[string][]byte{
		"det.txt":      zbuf.Bytes(),               // compressed, plain name
		"det-plain.gz": []byte("1,-1,1,2,3,4,0.5"), // plain, .gz name
		"det.txt.gz":   zbuf.Bytes(),
	}
	for name, data := range files {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		got, err := ReadFile(p)
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: got %+v, want %+v", name, got, want)
		}
	}
}

func TestReadFileErrors(t *testing.T) {
	dir := t.TempDir()
	missing := filepath.Join(dir, "missing.txt")
	if _, err := ReadFile(missing); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: error %v does not wrap os.ErrNotExist", err)
	}
	bad := filepath.Join(dir, "bad.txt")
	os.WriteFile(bad, []byte("1,1,1,1,1,1\n1,1\n"), 0o644)
	want := bad + `:2: want 6 to 10 columns, have 2 (found "1,1")`
	if _, err := ReadFile(bad); err == nil || err.Error() != want {
		t.Errorf("error = %v, want %s", err, want)
	}
	trunc := filepath.Join(dir, "trunc.gz")
	os.WriteFile(trunc, []byte{0x1f, 0x8b, 8, 0, 0}, 0o644)
	if _, err := ReadFile(trunc); err == nil || !strings.Contains(err.Error(), "gunzip") {
		t.Errorf("truncated gzip: error = %v, want a gunzip error", err)
	}
}

func TestWrite(t *testing.T) {
	tests := []struct {
		name string
		rows []Row
		want string
	}{
		{"tracker result, 10 columns", []Row{
			{Frame: 1, ID: 3, X: 10.5, Y: -2, W: 30, H: 60.25, Conf: 1, Class: -1, Visibility: -1},
			{Frame: 2, ID: 12, X: 0, Y: 0, W: 1e-7, H: 1234567, Conf: 0.875, Class: -1, Visibility: -1},
		}, "1,3,10.5,-2,30,60.25,1,-1,-1,-1\n2,12,0,0,0.0000001,1234567,0.875,-1,-1,-1\n"},
		{"ground truth, 9 columns", []Row{
			{Frame: 1, ID: 1, X: 1, Y: 2, W: 3, H: 4, Conf: 1, Class: 1, Visibility: 0.5},
			{Frame: 1, ID: 2, X: 1, Y: 2, W: 3, H: 4, Conf: 0, Class: -1, Visibility: -1},
		}, "1,1,1,2,3,4,1,1,0.5\n1,2,1,2,3,4,0,-1,-1\n"},
		{"no rows", nil, ""},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var buf bytes.Buffer
			if err := Write(&buf, tt.rows); err != nil {
				t.Fatal(err)
			}
			if buf.String() != tt.want {
				t.Errorf("Write =\n%s\nwant\n%s", buf.String(), tt.want)
			}
		})
	}
}

func TestWriteRefusesUnreadableRows(t *testing.T) {
	ok := Row{Frame: 1, ID: 1, W: 1, H: 1, Conf: 1, Class: -1, Visibility: -1}
	tests := []struct {
		name string
		edit func(*Row)
		want string
	}{
		{"frame zero", func(r *Row) { r.Frame = 0 }, "write row 1: frame: want a whole number from 1 to 10000000 (found 0)"},
		{"frame beyond MaxFrame", func(r *Row) { r.Frame = MaxFrame + 1 }, "write row 1: frame: want a whole number from 1 to 10000000 (found 10000001)"},
		{"negative width", func(r *Row) { r.W = -1 }, "write row 1: width: want a non-negative number (found -1)"},
		{"negative height", func(r *Row) { r.H = -3.5 }, "write row 1: height: want a non-negative number (found -3.5)"},
		{"NaN conf", func(r *Row) { r.Conf = math.NaN() }, "write row 1: want finite numbers (found NaN)"},
		{"infinite left", func(r *Row) { r.X = math.Inf(-1) }, "write row 1: want finite numbers (found -Inf)"},
		{"class too large", func(r *Row) { r.Class = 1 << 40 }, "write row 1: class: want a 32-bit whole number (found 1099511627776)"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			bad := ok
			tt.edit(&bad)
			var buf bytes.Buffer
			err := Write(&buf, []Row{ok, bad})
			if err == nil || err.Error() != tt.want {
				t.Fatalf("error = %v, want %s", err, tt.want)
			}
			if buf.Len() != 0 {
				t.Errorf("wrote %q before failing", buf.String())
			}
		})
	}
}

func TestWriteReadRoundTrip(t *testing.T) {
	sets := [][]Row{
		{
			{Frame: 1, ID: -1, X: 0.1, Y: 0.2, W: 1.0 / 3, H: 1e-300, Conf: 0.3, Class: -1, Visibility: -1},
			{Frame: 7, ID: math.MaxInt64, X: -1e15, Y: 123456789.123, W: 0, H: 5, Conf: -1, Class: -1, Visibility: -1},
		},
		{
			{Frame: 2, ID: 5, X: 10, Y: 20, W: 30, H: 40, Conf: 1, Class: 1, Visibility: 0.123456789},
			{Frame: 1, ID: math.MinInt64, X: 10, Y: 20, W: 30, H: 40, Conf: 0, Class: 12, Visibility: -1},
			{Frame: MaxFrame, ID: 0, X: 1, Y: 2, W: 3, H: 4, Conf: 2.5, Class: -1, Visibility: 0},
		},
	}
	for i, rows := range sets {
		var buf bytes.Buffer
		if err := Write(&buf, rows); err != nil {
			t.Fatalf("set %d: Write: %v", i, err)
		}
		got, err := Read(&buf, "round-trip")
		if err != nil {
			t.Fatalf("set %d: Read: %v", i, err)
		}
		if !reflect.DeepEqual(got, rows) {
			t.Errorf("set %d: round trip\n got %+v\nwant %+v", i, got, rows)
		}
	}
}

// FuzzRead checks that Read never panics, that it returns either an error or
// rows Write accepts, and that those rows survive a Write→Read round trip.
func FuzzRead(f *testing.F) {
	for _, s := range []string{
		"1,1,399,182,121,229,1,-1,-1,-1\n1,2,282,201,92,184,1,-1,-1,-1",
		"12,7,912,484,97,109,0,7,0.84158\n",
		"1 2 3 4 5 6",
		"1.0,2.0,1e3,-0,0x1p-2,1_0,1\r\n\r\n",
		"0,1,1,1,1,1", "1,1,1,1,-1,1", "1,1,NaN,1,1,1", ",,,,,,",
		"10000000,1,1,1,1,1", "10000001,1,1,1,1,1", "2e9,1,1,1,1,1",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		rows, err := Read(bytes.NewReader(data), "fuzz")
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %v is not a *ParseError", err)
			}
			return
		}
		for _, r := range rows {
			if what, found := check(r); what != "" {
				t.Fatalf("Read returned row %+v: %s (found %s)", r, what, found)
			}
		}
		var buf bytes.Buffer
		if err := Write(&buf, rows); err != nil {
			t.Fatalf("Write: %v", err)
		}
		again, err := Read(&buf, "again")
		if err != nil {
			t.Fatalf("Read after Write: %v\n%s", err, buf.String())
		}
		if len(rows) == 0 && len(again) == 0 {
			return
		}
		if !reflect.DeepEqual(again, rows) {
			t.Fatalf("round trip changed rows\n got %+v\nwant %+v", again, rows)
		}
	})
}
