package pipeline

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"tallyd/capture"
	"tallyd/events/bus"
	"tallyd/internal/config"
)

// CheckReport is what a dry run found.
type CheckReport struct {
	Sources []CheckedSource
	// Detector is the detector that was built (closed), for its description.
	Detector Detector
	// NATS is the configured server's URL with credentials hidden, or "" for
	// the embedded server; NATSReply is what the server answered.
	NATS      string
	NATSReply string
	// Capacity is how many such sources this machine holds, measured when
	// everything else checked out; CapacityErr says why it was not.
	Capacity    *Capacity
	CapacityErr error
}

// CheckedSource is one source opened by a dry run.
type CheckedSource struct {
	ID   string
	Kind capture.Kind
	Info capture.Info
}

// brokerTimeout bounds the dry run's connection to an external server.
const brokerTimeout = 5 * time.Second

// Check opens every source, the detector and a connection to an external
// NATS server without starting anything, and reports every problem at once
// (as config.Errors). When all is well it then measures the capacity: every
// source is opened once more and decoded for a moment, and the detector
// timed on its frames (a few seconds).
func Check(cfg *config.Config) (CheckReport, error) {
	p := &Pipeline{cfg: cfg, opts: Options{Pace: capture.PaceMax}, checking: true, log: slog.New(slog.DiscardHandler)}
	defer p.Close()
	var rep CheckReport
	var errs config.Errors
	for i, sc := range cfg.Sources {
		sr, err := p.openSource(i, sc)
		if err != nil {
			errs = appendErr(errs, err)
			continue
		}
		p.sources = append(p.sources, sr)
		rep.Sources = append(rep.Sources, CheckedSource{ID: sc.ID, Kind: sc.Kind(), Info: sr.info})
	}
	det, err := buildDetector(cfg)
	if err != nil {
		errs = appendErr(errs, err)
	} else {
		defer det.Close()
		rep.Detector = det
		errs = append(errs, checkClasses(cfg, det)...)
	}
	if n := cfg.Output.NATS; n.URL != "" {
		rep.NATS = bus.RedactURL(n.URL)
		nc, err := bus.Connect(n.URL, "tallyd-check-"+cfg.Site, nil, connectOptions(cfg, true)...)
		if err != nil {
			errs = append(errs, cfg.Errorf("output.nats.url", "cannot reach %s: %v", rep.NATS, err))
		} else {
			rep.NATSReply = fmt.Sprintf("server %s, version %s", nc.ConnectedServerName(), nc.ConnectedServerVersion())
			if n.JetStream.Mode != config.JetStreamOff {
				ctx, cancel := context.WithTimeout(context.Background(), brokerTimeout)
				js, jerr := jetstream.New(nc)
				if jerr == nil {
					_, jerr = js.AccountInfo(ctx)
				}
				cancel()
				switch {
				case jerr == nil:
					rep.NATSReply += ", JetStream"
				case n.JetStream.Mode == config.JetStreamRequired:
					errs = append(errs, cfg.Errorf("output.nats.jetstream.mode", "required, but the server at %s has no JetStream (%v)", rep.NATS, jerr))
				default:
					rep.NATSReply += ", no JetStream: events would go to plain subjects"
				}
			}
			nc.Close()
		}
	}
	if len(errs) > 0 {
		return rep, errs
	}
	// Release the sources first: a camera is then opened once at a time.
	_ = p.Close()
	p.det = det
	c, err := measureCapacity(context.Background(), cfg, det, rep.Sources, p.workers())
	if err != nil {
		rep.CapacityErr = err
	} else {
		rep.Capacity = &c
	}
	return rep, nil
}

func appendErr(errs config.Errors, err error) config.Errors {
	var fe config.FieldError
	if errors.As(err, &fe) {
		return append(errs, fe)
	}
	var fes config.Errors
	if errors.As(err, &fes) {
		return append(errs, fes...)
	}
	return append(errs, config.FieldError{Msg: err.Error()})
}
