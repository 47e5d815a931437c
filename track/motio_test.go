package track

import (
	"reflect"
	"testing"

	"tallyd/detect"
	"tallyd/internal/motfmt"
)

func TestToRows(t *testing.T) {
	tracks := []Track{
		{ID: 3, Box: detect.BoxXYWH(10.5, 20, 30, 40), Class: "person", Score: 0.7, Confirmed: true},
		{ID: 7, Box: detect.Box{X1: 1, Y1: 2, X2: 1, Y2: 2}},
	}
	want := []motfmt.Row{
		{Frame: 12, ID: 3, X: 10.5, Y: 20, W: 30, H: 40, Conf: 1, Class: -1, Visibility: -1},
		{Frame: 12, ID: 7, X: 1, Y: 2, W: 0, H: 0, Conf: 1, Class: -1, Visibility: -1},
	}
	if got := ToRows(12, tracks); !reflect.DeepEqual(got, want) {
		t.Errorf("ToRows =\n%+v\nwant\n%+v", got, want)
	}
	if got := ToRows(1, nil); len(got) != 0 {
		t.Errorf("ToRows(nil) = %+v, want empty", got)
	}
}
