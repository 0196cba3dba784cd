package main

import (
	"io"
	"os"
	"time"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"
)

// progress draws a bar on a terminal's stderr while a scan reads rows; on
// anything else, or with --quiet, it does nothing.
type progress struct {
	w     io.Writer
	label string
	bar   *progressbar.ProgressBar
	total int64
}

func newProgress(w io.Writer, quiet, qr bool) *progress {
	p := &progress{w: w, label: "reading rows"}
	if qr {
		p.label = "reading rows (QR)"
	}
	if quiet {
		p.w = nil
		return p
	}
	f, ok := w.(*os.File)
	if !ok || !term.IsTerminal(int(f.Fd())) {
		p.w = nil
	}
	return p
}

func (p *progress) update(read, total int64) {
	if p.w == nil {
		return
	}
	if p.bar == nil || (total > 0 && total != p.total) {
		p.total = total
		max := total
		if max <= 0 {
			max = -1 // unknown: a spinner with a count
		}
		p.bar = progressbar.NewOptions64(max,
			progressbar.OptionSetWriter(p.w),
			progressbar.OptionSetDescription(p.label),
			progressbar.OptionShowCount(),
			progressbar.OptionShowIts(),
			progressbar.OptionSetItsString("rows"),
			progressbar.OptionSetPredictTime(true),
			progressbar.OptionThrottle(100*time.Millisecond),
			progressbar.OptionClearOnFinish(),
		)
	}
	_ = p.bar.Set64(read)
}

func (p *progress) finish() {
	if p.bar != nil {
		_ = p.bar.Finish()
	}
}
