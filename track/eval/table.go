package eval

import (
	"fmt"
	"strings"
)

// Table formats the metrics as a short report for a person to read, ratios
// in percent as the MOTChallenge tables print them.
func (m Metrics) Table() string {
	var b strings.Builder
	pc := func(v float64) string { return fmt.Sprintf("%.2f %%", 100*v) }
	line := func(label string, cells ...string) {
		fmt.Fprintf(&b, "%-10s%s\n", label, strings.Join(cells, "   "))
	}
	rules := string(m.Rules)
	if rules == "" {
		rules = "mixed"
	}
	iou := "mixed"
	if m.IoU > 0 {
		iou = fmt.Sprintf("%g", m.IoU)
	}
	seqs := "1 sequence"
	if m.Sequences > 1 {
		seqs = fmt.Sprintf("%d sequences", m.Sequences)
	}
	line("scored", fmt.Sprintf("%s, %d frames, rules %s, IoU threshold %s", seqs, m.Frames, rules, iou))
	line("truth", fmt.Sprintf("%d boxes, %d ids", m.GT, m.GTIDs))
	tracks := fmt.Sprintf("%d boxes, %d ids", m.Pred, m.PredIDs)
	if m.Suppressed > 0 {
		tracks += fmt.Sprintf(" (%d more dropped on distractors)", m.Suppressed)
	}
	line("tracks", tracks)
	b.WriteByte('\n')
	line("CLEAR", "MOTA "+pc(m.MOTA), "MOTP "+pc(m.MOTP), "MODA "+pc(m.MODA), "recall "+pc(m.Recall), "precision "+pc(m.Precision))
	line("", fmt.Sprintf("TP %d", m.TP), fmt.Sprintf("FP %d", m.FP), fmt.Sprintf("FN %d", m.FN),
		fmt.Sprintf("ID switches %d", m.IDSW), fmt.Sprintf("fragmentations %d", m.Frag))
	line("", fmt.Sprintf("mostly tracked %d", m.MT), fmt.Sprintf("partially tracked %d", m.PT), fmt.Sprintf("mostly lost %d", m.ML))
	line("identity", "IDF1 "+pc(m.IDF1), "IDP "+pc(m.IDP), "IDR "+pc(m.IDR),
		fmt.Sprintf("IDTP %d", m.IDTP), fmt.Sprintf("IDFP %d", m.IDFP), fmt.Sprintf("IDFN %d", m.IDFN))
	line("HOTA", "HOTA "+pc(m.HOTA), "DetA "+pc(m.DetA), "AssA "+pc(m.AssA), "LocA "+pc(m.LocA))
	line("", "DetRe "+pc(m.DetRe), "DetPr "+pc(m.DetPr), "AssRe "+pc(m.AssRe), "AssPr "+pc(m.AssPr))
	return b.String()
}
