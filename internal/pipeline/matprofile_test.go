//go:build matprofile

package pipeline

import (
	"context"
	"strings"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"tallyd/capture"
)

// TestNoMatLeak replays a generated scene through the motion detector, at both
// paces, and checks that every OpenCV Mat the run created was closed. Run with
// `go test -tags matprofile` (make test does): gocv then counts open Mats.
func TestNoMatLeak(t *testing.T) {
	for _, pace := range []capture.Pace{capture.PaceMax, capture.PaceRealtime} {
		t.Run(string(pace), func(t *testing.T) {
			before := gocv.MatProfile.Count()
			cfg := siteFile(t, "site: s\nsources:\n  - id: walkway\n    scene: {seed: 2, duration: 30s, fps: 30, crossings: 3, visitors: 1}\n"+
				sceneRules+"output:\n  nats:\n    embedded: {port: 0}\n")
			p, err := Build(cfg, Options{Pace: pace})
			if err != nil {
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			if pace == capture.PaceRealtime {
				// Stop part-way: frames in flight at shutdown must be closed too.
				time.AfterFunc(1500*time.Millisecond, cancel)
			}
			if err := p.Run(ctx); err != nil {
				t.Fatal(err)
			}
			cancel()
			if err := p.Close(); err != nil {
				t.Fatal(err)
			}
			if n := gocv.MatProfile.Count() - before; n != 0 {
				var b strings.Builder
				_ = gocv.MatProfile.WriteTo(&b, 1)
				t.Fatalf("%d Mats left open:\n%s", n, b.String())
			}
		})
	}
}
