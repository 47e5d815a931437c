package pipeline

import (
	"runtime/debug"
	"sync"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/prometheus/client_golang/prometheus"

	"tallyd/capture"
	"tallyd/events"
)

// metrics are the pipeline's Prometheus metrics. Counters and gauges are
// read from the pipeline's own counters when scraped (so they equal the
// status and the summary); the histograms are observed per frame.
type metrics struct {
	inference *prometheus.HistogramVec
	age       *prometheus.HistogramVec
	gap       *prometheus.HistogramVec
}

// handover records the time a source had no holder before this daemon took
// it over (shared sites).
func (m *metrics) handover(source string, gap float64) {
	m.gap.WithLabelValues(source).Observe(gap)
}

func (m *metrics) frame(source string, inference, age time.Duration) {
	m.inference.WithLabelValues(source).Observe(inference.Seconds())
	m.age.WithLabelValues(source).Observe(age.Seconds())
}

// Register adds the pipeline's metrics to reg (names per the Prometheus
// naming conventions: tallyd_<subsystem>_<name>_<unit>, counters end in
// _total, no track ids as labels). Call it before Run.
func (p *Pipeline) Register(reg prometheus.Registerer) error {
	m := &metrics{
		inference: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name: "tallyd_detect_inference_seconds",
			Help: "Detector time per processed frame (a batch's time shared out over its frames).",
			// 1 ms to ~4 s: motion detection takes milliseconds, a CPU
			// YOLO tens to hundreds.
			Buckets: prometheus.ExponentialBuckets(0.001, 2, 13),
		}, []string{"source"}),
		age: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name:    "tallyd_frame_age_seconds",
			Help:    "Time from reading a frame to the end of publishing its events.",
			Buckets: prometheus.ExponentialBuckets(0.005, 2, 12),
		}, []string{"source"}),
	}
	m.gap = prometheus.NewHistogramVec(prometheus.HistogramOpts{
		Name: "tallyd_handover_gap_seconds",
		Help: "Time a shared source had no holder before this daemon took it over (the previous holder's last renewal to the first frame here).",
		// 0.25 s to ~2 min: a clean hand-over takes well under a second,
		// one after a crash the lease's time to live and more.
		Buckets: prometheus.ExponentialBuckets(0.25, 2, 10),
	}, []string{"source"})
	for _, c := range []prometheus.Collector{m.inference, m.age, m.gap, &metricsCollector{p: p}} {
		if err := reg.Register(c); err != nil {
			return err
		}
	}
	p.metrics = m
	return nil
}

// metricsCollector reads the pipeline's counters at scrape time.
type metricsCollector struct{ p *Pipeline }

var (
	descBuild     = prometheus.NewDesc("tallyd_build_info", "Build of the running tallyd (value 1).", []string{"version", "goversion"}, nil)
	descRead      = prometheus.NewDesc("tallyd_source_frames_read_total", "Frames decoded.", []string{"source"}, nil)
	descProcessed = prometheus.NewDesc("tallyd_source_frames_processed_total", "Frames that went through the detector.", []string{"source"}, nil)
	descDropped   = prometheus.NewDesc("tallyd_source_frames_dropped_total", "Frames read but not detected, by reason.", []string{"source", "reason"}, nil)
	descUp        = prometheus.NewDesc("tallyd_source_up", "1 when the source delivers frames (running, or a live source's link is up).", []string{"source"}, nil)
	descReconn    = prometheus.NewDesc("tallyd_source_reconnects_total", "Connections of a live source after its first.", []string{"source"}, nil)
	descLast      = prometheus.NewDesc("tallyd_source_last_frame_timestamp_seconds", "Wall-clock time of the last frame read (Unix seconds; 0 before the first).", []string{"source"}, nil)
	descRuleEv    = prometheus.NewDesc("tallyd_rule_events_total", "Counts of a rule by event kind (line: in, out; zone: enter, exit, dwell), restored totals included.", []string{"source", "rule", "kind"}, nil)
	descOcc       = prometheus.NewDesc("tallyd_zone_occupancy", "Tracks inside a zone now.", []string{"source", "rule"}, nil)
	descSrcEv     = prometheus.NewDesc("tallyd_source_events_total", "Events a source's rules produced in this run.", []string{"source"}, nil)
	descProduced  = prometheus.NewDesc("tallyd_events_produced_total", "Events the rules produced in this run.", nil, nil)
	descRuleAcked = prometheus.NewDesc("tallyd_rule_events_acked_total", "Events of a rule acknowledged by the stream (or handed to the NATS server with JetStream off), by kind; events left in the outbox by an earlier run included.", []string{"source", "rule", "kind"}, nil)
	descAcked     = prometheus.NewDesc("tallyd_events_acked_total", "Events acknowledged by the stream (or handed to the NATS server with JetStream off).", nil, nil)
	descPending   = prometheus.NewDesc("tallyd_events_pending", "Events waiting in the outbox or the publisher's queue.", nil, nil)
	descLost      = prometheus.NewDesc("tallyd_events_dropped_total", "Events lost: a full queue or outbox dropped them, or they could not be encoded.", nil, nil)
	descFailures  = prometheus.NewDesc("tallyd_delivery_failures_total", "Failed delivery attempts (JetStream ones are retried).", nil, nil)
	descConnected = prometheus.NewDesc("tallyd_broker_connected", "1 while the connection to the NATS server is up.", nil, nil)
	descHandovers = prometheus.NewDesc("tallyd_source_handovers_total", "Holds of a shared source this daemon began (the first hold of a source included).", []string{"source"}, nil)
	descFenced    = prometheus.NewDesc("tallyd_events_fenced_total", "Events refused because the lease of their source (or area) was no longer valid when they were produced.", []string{"source"}, nil)
	descJSONL     = prometheus.NewDesc("tallyd_jsonl_events_total", "Events of the JSON-lines file, by outcome.", []string{"outcome"}, nil)
)

func (c *metricsCollector) Describe(ch chan<- *prometheus.Desc) { prometheus.DescribeByCollect(c, ch) }

func (c *metricsCollector) Collect(ch chan<- prometheus.Metric) {
	p := c.p
	version, gov := buildInfo()
	ch <- prometheus.MustNewConstMetric(descBuild, prometheus.GaugeValue, 1, version, gov)
	for i, st := range p.Status() {
		sr := p.sources[i]
		id := st.ID
		counter := func(d *prometheus.Desc, v int64, labels ...string) {
			ch <- prometheus.MustNewConstMetric(d, prometheus.CounterValue, float64(v), append([]string{id}, labels...)...)
		}
		counter(descRead, st.Read)
		counter(descProcessed, st.Processed)
		for _, d := range []struct {
			why DropReason
			n   int64
		}{{DropForRate, st.Dropped.ForRate}, {DropMailbox, st.Dropped.Mailbox}, {DropPrep, st.Dropped.Prep},
			{DropTooOld, st.Dropped.TooOld}, {DropGated, st.Dropped.Gated}} {
			counter(descDropped, d.n, string(d.why))
		}
		counter(descSrcEv, st.Events)
		if sr.shared != nil {
			counter(descHandovers, st.Holds)
			counter(descFenced, st.Fenced)
		}
		ws := sr.worker.Stats()
		ch <- prometheus.MustNewConstMetric(descUp, prometheus.GaugeValue, boolFloat(sourceUp(ws)), id)
		counter(descReconn, max(0, ws.Link.Conn-1))
		last := 0.0
		if !ws.LastFrame.IsZero() {
			last = float64(ws.LastFrame.UnixNano()) / 1e9
		}
		ch <- prometheus.MustNewConstMetric(descLast, prometheus.GaugeValue, last, id)
		totals, occ, _, _ := sr.view.counts()
		if totals == nil {
			totals = zeroTotals(p.rulesConfig(), id)
		}
		for rule, t := range totals {
			switch t.Kind {
			case events.RuleLine:
				counter(descRuleEv, int64(t.In), rule, string(events.KindIn))
				counter(descRuleEv, int64(t.Out), rule, string(events.KindOut))
			case events.RuleZone:
				counter(descRuleEv, int64(t.Enter), rule, string(events.KindEnter))
				counter(descRuleEv, int64(t.Exit), rule, string(events.KindExit))
				counter(descRuleEv, int64(t.Dwell), rule, string(events.KindDwell))
				ch <- prometheus.MustNewConstMetric(descOcc, prometheus.GaugeValue, float64(occ[rule]), id, rule)
			}
		}
	}
	for k, n := range p.out.acks.byRule() {
		ch <- prometheus.MustNewConstMetric(descRuleAcked, prometheus.CounterValue, float64(n), k.source, k.rule, k.kind)
	}
	d := p.out.stats()
	ch <- prometheus.MustNewConstMetric(descProduced, prometheus.CounterValue, float64(d.Produced))
	ch <- prometheus.MustNewConstMetric(descAcked, prometheus.CounterValue, float64(d.Acked))
	ch <- prometheus.MustNewConstMetric(descPending, prometheus.GaugeValue, float64(d.Pending))
	ch <- prometheus.MustNewConstMetric(descLost, prometheus.CounterValue, float64(d.Dropped))
	ch <- prometheus.MustNewConstMetric(descFailures, prometheus.CounterValue, float64(d.Failures))
	ch <- prometheus.MustNewConstMetric(descConnected, prometheus.GaugeValue, boolFloat(p.brokerConnected()))
	if j := d.JSONL; j != nil {
		ch <- prometheus.MustNewConstMetric(descJSONL, prometheus.CounterValue, float64(j.Written), "written")
		ch <- prometheus.MustNewConstMetric(descJSONL, prometheus.CounterValue, float64(j.Dropped), "dropped")
		ch <- prometheus.MustNewConstMetric(descJSONL, prometheus.CounterValue, float64(j.Failed), "failed")
	}
}

// buildInfo is the binary's version and Go version, read once.
var buildInfo = sync.OnceValues(func() (string, string) {
	if bi, ok := debug.ReadBuildInfo(); ok {
		return bi.Main.Version, bi.GoVersion
	}
	return "unknown", "unknown"
})

// sourceUp: the source delivers frames (a recording or scene running, or a
// live source whose link is up).
func sourceUp(st capture.Stats) bool {
	return st.State == capture.StateRunning || st.State == capture.StateUp
}

func (p *Pipeline) brokerConnected() bool {
	return p.nc != nil && p.nc.Status() == nats.CONNECTED
}

func boolFloat(b bool) float64 {
	if b {
		return 1
	}
	return 0
}
