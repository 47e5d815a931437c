package pipeline

import (
	"fmt"

	"tallyd/detect"
	"tallyd/detect/motion"
	"tallyd/detect/onnx"
	"tallyd/events"
	"tallyd/events/bus"
	"tallyd/internal/config"
	"tallyd/internal/motfmt"
)

func buildDetector(cfg *config.Config) (Detector, error) {
	d := cfg.Detector
	switch d.Kind {
	case "file":
		fd := &fileDetector{bySource: map[string]*detect.FileDetector{}}
		for id, path := range d.File.Paths {
			rows, err := motfmt.ReadFile(cfg.Resolve(path))
			if err != nil {
				return nil, cfg.Errorf("detector.file.paths."+id, "%v", err)
			}
			fd.bySource[id] = detect.NewFileDetector(rows, d.Class, d.File.MinScore)
		}
		return fd, nil
	case "motion":
		m := d.Motion
		return motion.New(motion.Config{
			History: m.History, VarThreshold: m.VarThreshold, LearningRate: m.LearningRate,
			WarmupFrames: m.WarmupFrames, MinArea: m.MinArea, OpenKernel: m.OpenKernel,
			CloseKernel: m.CloseKernel, Class: d.Class,
		}), nil
	case "onnx":
		det, err := onnx.New(onnx.FromSite(cfg))
		if err != nil {
			return nil, onnx.SiteError(cfg, err)
		}
		return det, nil
	}
	return nil, cfg.Errorf("detector.kind", "unknown detector %q", d.Kind)
}

// openOutputs starts the embedded NATS server or connects to the configured
// one, and opens the JSON-lines file.
func (p *Pipeline) openOutputs() error {
	n := p.cfg.Output.NATS
	url := n.URL
	if url == "" {
		srv, err := bus.StartEmbedded(n.Embedded.Host, n.Embedded.Port, p.log)
		if err != nil {
			return fmt.Errorf("start embedded NATS server on %s:%d: %w", n.Embedded.Host, n.Embedded.Port, err)
		}
		p.closers = append(p.closers, func() error { srv.Shutdown(); return nil })
		url = srv.URL()
		p.natsURL = url
		p.log.Info("embedded NATS server started", "url", url)
	} else {
		p.natsURL = url
	}
	nc, err := bus.Connect(url, "tallyd-"+p.cfg.Site, p.log)
	if err != nil {
		return fmt.Errorf("connect to NATS at %s: %w", config.Redact(url), err)
	}
	pub := bus.NewPublisher(nc, n.Prefix)
	p.drains = append(p.drains, pub.Close)
	p.pubs = append(p.pubs, pub)
	if p.cfg.Output.JSONL != "" {
		path := p.cfg.Resolve(p.cfg.Output.JSONL)
		j, err := events.NewJSONLFile(path)
		if err != nil {
			return p.cfg.Errorf("output.jsonl", "%v", err)
		}
		p.drains = append(p.drains, j.Close)
		p.pubs = append(p.pubs, j)
	}
	return nil
}

// NATSURL is the URL events are published to (the embedded server's when
// none was configured).
func (p *Pipeline) NATSURL() string { return p.natsURL }
