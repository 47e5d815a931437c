package main

import (
	"io"
	"os"
	"time"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"

	"tallyd/internal/pipeline"
)

// showProgress draws a progress bar of a replay on stderr (frames done out
// of the frames the recordings declare, frames/s, time left) when mode is
// "on", or "auto" and stderr is a terminal. It returns a func that ends the
// bar.
func showProgress(p *pipeline.Pipeline, mode string, stderr io.Writer) func() {
	if mode == "off" || (mode == "auto" && !isTerminal(stderr)) {
		return func() {}
	}
	var total int64
	for _, st := range p.Status() {
		total += st.Declared
	}
	if total <= 0 {
		total = -1 // unknown length: a spinner with the count
	}
	bar := progressbar.NewOptions64(total,
		progressbar.OptionSetWriter(stderr),
		progressbar.OptionSetDescription("replay"),
		progressbar.OptionShowCount(),
		progressbar.OptionShowIts(),
		progressbar.OptionSetItsString("frames"),
		progressbar.OptionSetPredictTime(true),
		progressbar.OptionThrottle(200*time.Millisecond),
		progressbar.OptionClearOnFinish(),
	)
	stop, done := make(chan struct{}), make(chan struct{})
	go func() {
		defer close(done)
		t := time.NewTicker(250 * time.Millisecond)
		defer t.Stop()
		for {
			var n int64
			for _, st := range p.Status() {
				n += st.Read
			}
			_ = bar.Set64(n)
			select {
			case <-stop:
				_ = bar.Finish()
				return
			case <-t.C:
			}
		}
	}()
	return func() { close(stop); <-done }
}

func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}
