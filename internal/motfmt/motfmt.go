// Package motfmt reads and writes the MOTChallenge text format: the plain
// comma-separated files in which multi-object-tracking benchmarks ship ground
// truth, public detections and tracker results (Milan et al., "MOT16: A
// Benchmark for Multi-Object Tracking", arXiv:1603.00831).
//
// Each line holds one box:
//
//	frame, id, left, top, width, height, conf[, class, visibility]     (MOT16/17, 6 to 9 columns)
//	frame, id, left, top, width, height, conf, x, y, z                 (MOT15, 10 columns)
//
// Frames are 1-based; detection files use id -1; right = left + width and
// bottom = top + height. Columns 8 and 9 are read as class and visibility
// only in files of 8 or 9 columns; in the 10-column layout they are world
// coordinates (almost always -1), which this package ignores. Absent values
// read as -1. Values are kept as written: unlike some evaluation kits this
// package does not subtract 1 from left and top.
//
// A file is refused beyond the limits MaxFrame, MaxRows and MaxLineBytes,
// with a *ParseError naming the line, so that a corrupt or hostile file
// cannot make a reader, or a tool that sizes its work by frame number,
// exhaust memory. Widths and heights must be non-negative and every value
// finite.
package motfmt

import (
	"bufio"
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
)

// Limits of a MOTChallenge file.
const (
	// MaxFrame is the largest frame number: frames run from 1 to MaxFrame,
	// over 92 hours at 30 frames/s. The longest sequence of the MOT17
	// reference set (../shared/reference/mot) has 1,050 frames.
	MaxFrame = 10_000_000
	// MaxRows is the most rows (non-blank lines) one file may hold; they
	// take 72 bytes each once read, 1.4 GB at the limit, and reading that
	// many takes about 20 s on one core. The largest file of the MOT17
	// reference set, MOT17-04's ground truth, has 108,005.
	MaxRows = 20_000_000
	// MaxLineBytes bounds one line, blanks and line end included; lines of
	// the reference set are under 40 bytes.
	MaxLineBytes = 64 << 10
)

// Row is one line of a MOTChallenge file.
type Row struct {
	Frame      int     // 1-based frame number
	ID         int64   // object or track id; -1 in detection files
	X, Y, W, H float64 // left, top, width, height in pixels
	Conf       float64 // detection score, or the ground truth's "consider" flag; -1 when absent
	Class      int     // class id (MOT17 ground truth); -1 when absent
	Visibility float64 // visible fraction 0..1 (MOT17 ground truth); -1 when absent
}

// ParseError is one malformed line, located by file name and line number.
type ParseError struct {
	Name  string // file name given to Read
	Line  int    // 1-based line number
	What  string // what is wrong, e.g. "column 5 (width): want a non-negative number"
	Found string // the offending field, or the whole line for a wrong column count
}

// Error formats the problem as "name:line: what (found "text")".
func (e *ParseError) Error() string {
	return fmt.Sprintf("%s:%d: %s (found %q)", e.Name, e.Line, e.What, e.Found)
}

const (
	minColumns = 6
	maxColumns = 10
	// pollLines is how many lines ReadContext reads between two looks at
	// its context (a few milliseconds).
	pollLines = 1 << 13
)

// Read parses a MOTChallenge text stream. name is used in error messages
// (usually the file path). Blank lines are skipped, fields may be padded
// with spaces, and a line without any comma is split on white space. The
// first malformed line, or the first beyond a limit, stops the parse with a
// *ParseError.
func Read(r io.Reader, name string) ([]Row, error) {
	return ReadContext(context.Background(), r, name)
}

// ReadContext is Read that gives up soon after ctx is done, with an error
// wrapping ctx.Err().
func ReadContext(ctx context.Context, r io.Reader, name string) ([]Row, error) {
	return read(ctx, r, name, MaxRows)
}

// read is ReadContext with the row limit given.
func read(ctx context.Context, r io.Reader, name string, maxRows int) ([]Row, error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 4096), MaxLineBytes)
	var rows []Row
	line := 0
	for sc.Scan() {
		line++
		if line%pollLines == 0 {
			if err := ctx.Err(); err != nil {
				return nil, fmt.Errorf("read %s: interrupted at line %d: %w", name, line, err)
			}
		}
		text := strings.TrimSpace(sc.Text())
		if text == "" {
			continue
		}
		if len(rows) == maxRows {
			return nil, &ParseError{Name: name, Line: line, What: fmt.Sprintf("want at most %d rows in a file", maxRows), Found: text}
		}
		row, perr := parseLine(text)
		if perr != nil {
			perr.Name, perr.Line = name, line
			return nil, perr
		}
		rows = append(rows, row)
	}
	if err := sc.Err(); err != nil {
		if errors.Is(err, bufio.ErrTooLong) {
			return nil, &ParseError{Name: name, Line: line + 1, What: fmt.Sprintf("want a line shorter than %d bytes", MaxLineBytes), Found: "…"}
		}
		return nil, fmt.Errorf("read %s: %w", name, err)
	}
	return rows, nil
}

// ReadFile reads a MOTChallenge file, gunzipping it when its content starts
// with the gzip magic bytes (whatever its name).
func ReadFile(path string) ([]Row, error) {
	return ReadFileContext(context.Background(), path)
}

// ReadFileContext is ReadFile that gives up soon after ctx is done, with an
// error wrapping ctx.Err().
func ReadFileContext(ctx context.Context, path string) ([]Row, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("read MOTChallenge file: %w", err)
	}
	defer f.Close()
	br := bufio.NewReader(f)
	var r io.Reader = br
	if magic, _ := br.Peek(2); bytes.Equal(magic, []byte{0x1f, 0x8b}) {
		zr, err := gzip.NewReader(br)
		if err != nil {
			return nil, fmt.Errorf("read %s: gunzip: %w", path, err)
		}
		defer zr.Close()
		r = zr
	}
	return ReadContext(ctx, r, path)
}

// Write writes rows in the MOT17 layout with the shortest decimal form of
// every number. A slice whose rows all lack class and visibility (-1) is
// written in the 10-column layout MOTChallenge expects for tracker results
// ("…,conf,-1,-1,-1"); otherwise every row has 9 columns
// ("frame,id,x,y,w,h,conf,class,vis"). Rows that Read would reject (frame
// outside 1..MaxFrame, negative size, NaN or infinite values, more than
// MaxRows) are refused, so whatever Write accepts Read gives back unchanged.
func Write(w io.Writer, rows []Row) error {
	if len(rows) > MaxRows {
		return fmt.Errorf("write rows: want at most %d rows (found %d)", MaxRows, len(rows))
	}
	tenColumns := true
	for i, r := range rows {
		if what, found := check(r); what != "" {
			return fmt.Errorf("write row %d: %s (found %s)", i, what, found)
		}
		if r.Class != -1 || r.Visibility != -1 {
			tenColumns = false
		}
	}
	bw := bufio.NewWriter(w)
	var buf []byte
	for _, r := range rows {
		buf = buf[:0]
		buf = strconv.AppendInt(buf, int64(r.Frame), 10)
		buf = append(buf, ',')
		buf = strconv.AppendInt(buf, r.ID, 10)
		for _, v := range [...]float64{r.X, r.Y, r.W, r.H, r.Conf} {
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, v, 'f', -1, 64)
		}
		if tenColumns {
			buf = append(buf, ",-1,-1,-1\n"...)
		} else {
			buf = append(buf, ',')
			buf = strconv.AppendInt(buf, int64(r.Class), 10)
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, r.Visibility, 'f', -1, 64)
			buf = append(buf, '\n')
		}
		if _, err := bw.Write(buf); err != nil {
			return fmt.Errorf("write rows: %w", err)
		}
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("write rows: %w", err)
	}
	return nil
}

// parseLine parses one non-blank, trimmed line; the error lacks Name and Line.
func parseLine(text string) (Row, *ParseError) {
	var fields []string
	if strings.IndexByte(text, ',') >= 0 {
		fields = strings.Split(text, ",")
	} else {
		fields = strings.Fields(text)
	}
	n := len(fields)
	if n < minColumns || n > maxColumns {
		return Row{}, &ParseError{What: fmt.Sprintf("want %d to %d columns, have %d", minColumns, maxColumns, n), Found: text}
	}
	names := &columns9
	if n == maxColumns {
		names = &columns10
	}
	var vals [maxColumns]float64
	for i := range fields {
		f := strings.TrimSpace(fields[i])
		fields[i] = f
		v, err := strconv.ParseFloat(f, 64)
		if err != nil && !isRange(err) {
			return Row{}, colErr(names, i, "want a number", f)
		}
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return Row{}, colErr(names, i, "want a finite number", f)
		}
		vals[i] = v
	}
	r := Row{Conf: -1, Class: -1, Visibility: -1}
	frame, ok := parseWhole(fields[0], vals[0], strconv.IntSize)
	if !ok || frame < 1 || frame > MaxFrame {
		return Row{}, colErr(names, 0, frameRule, fields[0])
	}
	r.Frame = int(frame)
	if r.ID, ok = parseWhole(fields[1], vals[1], 64); !ok {
		return Row{}, colErr(names, 1, "want a whole number", fields[1])
	}
	r.X, r.Y, r.W, r.H = vals[2], vals[3], vals[4], vals[5]
	for i := 4; i <= 5; i++ {
		if vals[i] < 0 {
			return Row{}, colErr(names, i, "want a non-negative number", fields[i])
		}
	}
	if n > 6 {
		r.Conf = vals[6]
	}
	if n == 8 || n == 9 {
		c, ok := parseWhole(fields[7], vals[7], 32)
		if !ok {
			return Row{}, colErr(names, 7, "want a whole number", fields[7])
		}
		r.Class = int(c)
	}
	if n == 9 {
		r.Visibility = vals[8]
	}
	return r, nil
}

// frameRule is what a frame number must be.
var frameRule = fmt.Sprintf("want a whole number from 1 to %d", MaxFrame)

// Column names used in error messages, by 0-based index, for the 6..9-column
// layout and for the 10-column one.
var (
	columns9  = [maxColumns]string{"frame", "id", "left", "top", "width", "height", "conf", "class", "visibility"}
	columns10 = [maxColumns]string{"frame", "id", "left", "top", "width", "height", "conf", "x", "y", "z"}
)

// colErr builds the error for column i (0-based) holding text.
func colErr(names *[maxColumns]string, i int, what, text string) *ParseError {
	return &ParseError{What: fmt.Sprintf("column %d (%s): %s", i+1, names[i], what), Found: text}
}

func isRange(err error) bool {
	ne, ok := err.(*strconv.NumError)
	return ok && ne.Err == strconv.ErrRange
}

// parseWhole reads a whole number that fits in bits. Files written by numeric
// tools often hold "12.000000" for frame and id, so a whole-valued decimal
// (already parsed into v) is accepted too.
func parseWhole(s string, v float64, bits int) (int64, bool) {
	if n, err := strconv.ParseInt(s, 10, bits); err == nil {
		return n, true
	}
	lim := math.Ldexp(1, bits-1)
	if v != math.Trunc(v) || v < -lim || v >= lim {
		return 0, false
	}
	return int64(v), true
}

// check reports why Write cannot store a row so that Read gives it back
// ("" when it can), and the value at fault.
func check(r Row) (what, found string) {
	num := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	switch {
	case r.Frame < 1 || r.Frame > MaxFrame:
		return "frame: " + frameRule, strconv.Itoa(r.Frame)
	case r.W < 0:
		return "width: want a non-negative number", num(r.W)
	case r.H < 0:
		return "height: want a non-negative number", num(r.H)
	case r.Class < math.MinInt32 || r.Class > math.MaxInt32:
		return "class: want a 32-bit whole number", strconv.Itoa(r.Class)
	}
	for _, v := range [...]float64{r.X, r.Y, r.W, r.H, r.Conf, r.Visibility} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return "want finite numbers", num(v)
		}
	}
	return "", ""
}
