package pipeline

import (
	"errors"
	"log/slog"

	"tallyd/capture"
	"tallyd/internal/config"
)

// CheckReport is what a dry run found.
type CheckReport struct {
	Sources []CheckedSource
	NATS    string // configured URL, password hidden
}

// CheckedSource is one source opened by a dry run.
type CheckedSource struct {
	ID   string
	Kind string
	Info capture.Info
}

// Check opens every source and the detector without starting anything, and
// reports every problem at once (as config.Errors).
func Check(cfg *config.Config) (CheckReport, error) {
	p := &Pipeline{cfg: cfg, opts: Options{Pace: capture.PaceMax}, checking: true}
	p.log = slog.New(slog.DiscardHandler)
	defer p.release()
	rep := CheckReport{NATS: config.Redact(cfg.Output.NATS.URL)}
	var errs config.Errors
	for i, sc := range cfg.Sources {
		sr, err := p.openSource(i, sc)
		if err != nil {
			errs = appendErr(errs, err)
			continue
		}
		rep.Sources = append(rep.Sources, CheckedSource{ID: sc.ID, Kind: sc.Kind(), Info: sr.info})
	}
	det, err := buildDetector(cfg)
	if err != nil {
		errs = appendErr(errs, err)
	} else {
		_ = det.Close()
	}
	if len(errs) > 0 {
		return rep, errs
	}
	return rep, nil
}

func appendErr(errs config.Errors, err error) config.Errors {
	var fe config.FieldError
	if errors.As(err, &fe) {
		return append(errs, fe)
	}
	return append(errs, config.FieldError{Msg: err.Error()})
}
