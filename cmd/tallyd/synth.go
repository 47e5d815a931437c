package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strings"

	"gocv.io/x/gocv"

	"tallyd/capture/scene"
	"tallyd/internal/config"
	"tallyd/internal/motfmt"
	"tallyd/internal/pipeline"
)

func cmdSynth(ctx context.Context, args []string, stdout, _ io.Writer) error {
	fs := newFlags("synth", "synth -c FILE [--source ID] [--video OUT.avi] [--truth OUT.json] [--gt OUT.txt]", stdout)
	cfgPath := fs.String("c", "", "site file (YAML) with at least one generated scene source")
	sourceID := fs.String("source", "", "generated source to write (default: the first one)")
	videoOut := fs.String("video", "", "video file to write (Motion-JPEG in AVI)")
	truthOut := fs.String("truth", "", "JSON file for the true totals per rule (same shape as replay's summary rules)")
	gtOut := fs.String("gt", "", "ground-truth boxes with identities, MOTChallenge text format")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *videoOut == "" && *truthOut == "" && *gtOut == "" {
		return usageErr("name at least one of --video, --truth and --gt")
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		return err
	}
	src, err := pickScene(cfg, *sourceID)
	if err != nil {
		return err
	}
	sc, err := scene.New(pipeline.SceneConfig(*src.Scene))
	if err != nil {
		return err
	}
	w, h := sc.Size()
	var wrote []string
	if *videoOut != "" {
		if err := writeVideo(ctx, sc, *videoOut); err != nil {
			return err
		}
		wrote = append(wrote, fmt.Sprintf("%s (%dx%d, %d frames at %.0f fps)", *videoOut, w, h, sc.Frames(), sc.FPS()))
	}
	if *truthOut != "" {
		lines, zones := pipeline.RulesFor(cfg, src.ID, w, h)
		b, err := json.MarshalIndent(pipeline.SceneTruth(sc, lines, zones), "", "  ")
		if err != nil {
			return err
		}
		if err := os.WriteFile(*truthOut, append(b, '\n'), 0o644); err != nil {
			return fmt.Errorf("write truth: %w", err)
		}
		wrote = append(wrote, *truthOut)
	}
	if *gtOut != "" {
		if err := writeGT(sc, *gtOut); err != nil {
			return err
		}
		wrote = append(wrote, *gtOut)
	}
	fmt.Fprintf(stdout, "wrote %s\n", strings.Join(wrote, ", "))
	return nil
}

func pickScene(cfg *config.Config, id string) (config.Source, error) {
	for _, s := range cfg.Sources {
		if s.Scene != nil && (id == "" || s.ID == id) {
			return s, nil
		}
	}
	if id != "" {
		return config.Source{}, usageErr("--source: no generated scene source with id %q in %s", id, cfg.File)
	}
	return config.Source{}, usageErr("%s has no generated scene source", cfg.File)
}

func writeVideo(ctx context.Context, sc *scene.Scene, path string) error {
	w, h := sc.Size()
	vw, err := gocv.VideoWriterFile(path, "MJPG", sc.FPS(), w, h, true)
	if err != nil {
		return fmt.Errorf("write video %s: %w", path, err)
	}
	defer vw.Close()
	if !vw.IsOpened() {
		return fmt.Errorf("write video %s: OpenCV cannot open it for writing", path)
	}
	m := gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3)
	defer m.Close()
	buf, err := m.DataPtrUint8()
	if err != nil {
		return err
	}
	for i := 0; i < sc.Frames(); i++ {
		if ctx.Err() != nil {
			return fmt.Errorf("%w: stopped at frame %d of %d; %s holds only those", errIncomplete, i, sc.Frames(), path)
		}
		sc.Render(i, buf)
		if err := vw.Write(m); err != nil {
			return fmt.Errorf("write video %s frame %d: %w", path, i, err)
		}
	}
	return nil
}

func writeGT(sc *scene.Scene, path string) error {
	var rows []motfmt.Row
	for i := 0; i < sc.Frames(); i++ {
		for _, o := range sc.Truth(i) {
			rows = append(rows, motfmt.Row{Frame: i + 1, ID: o.ID, X: o.Box.X1, Y: o.Box.Y1, W: o.Box.W(), H: o.Box.H(),
				Conf: 1, Class: 1, Visibility: 1})
		}
	}
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("write ground truth: %w", err)
	}
	if err := motfmt.Write(f, rows); err != nil {
		f.Close()
		return fmt.Errorf("write ground truth %s: %w", path, err)
	}
	return f.Close()
}
