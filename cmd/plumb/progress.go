package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"time"

	"golang.org/x/term"
)

// progress keeps one line on a terminal's stderr up to date while a scan
// reads rows, in plumb's words:
//
//	reading district_daily: 240 of 480 rows · 12k rows/s · about 3 s left
//
// On anything but a terminal, or with --quiet, it does nothing.
type progress struct {
	mu      sync.Mutex
	w       io.Writer // nil: draw nothing
	label   string
	now     func() time.Time
	start   time.Time
	drawn   time.Time
	visible bool
}

// progressEvery is the least time between two redraws.
const progressEvery = 100 * time.Millisecond

func newProgress(w io.Writer, quiet bool, what string, qr bool) *progress {
	label := "reading " + what
	if qr {
		label += " (QR)"
	}
	p := &progress{w: w, label: label, now: time.Now}
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

// update is the scan's Progress callback.
func (p *progress) update(read, total int64) {
	if p.w == nil {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	now := p.now()
	if p.start.IsZero() {
		p.start = now
	}
	if p.visible && now.Sub(p.drawn) < progressEvery && (total <= 0 || read < total) {
		return
	}
	p.drawn, p.visible = now, true
	fmt.Fprintf(p.w, "\r%s\x1b[K", progressLine(p.label, read, total, now.Sub(p.start)))
}

// finish clears the line.
func (p *progress) finish() {
	if p.w == nil {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.visible {
		fmt.Fprint(p.w, "\r\x1b[K")
		p.visible = false
	}
}

// progressLine says how far a scan is: rows read (of the total when it is
// known), the rate once there is one to tell, and the time left when the
// total is known.
func progressLine(label string, read, total int64, elapsed time.Duration) string {
	parts := []string{fmt.Sprintf("%s: %d rows", label, read)}
	if total > 0 {
		parts[0] = fmt.Sprintf("%s: %d of %d rows", label, read, total)
	}
	// A rate needs rows and time to rest on: none is shown rather than 0.
	if read > 0 && elapsed >= progressEvery {
		rate := float64(read) / elapsed.Seconds()
		parts = append(parts, countWord(rate)+" rows/s")
		if total > read {
			parts = append(parts, "about "+timeLeft(float64(total-read)/rate)+" left")
		}
	}
	return strings.Join(parts, " · ")
}

// countWord writes a count for reading at a glance: 950, 9.5k, 12k, 3.4M.
func countWord(v float64) string {
	switch {
	case v < 999.5:
		return fmt.Sprintf("%.0f", v)
	case v < 9950:
		return fmt.Sprintf("%.1fk", v/1e3)
	case v < 999.5e3:
		return fmt.Sprintf("%.0fk", v/1e3)
	case v < 9.95e6:
		return fmt.Sprintf("%.1fM", v/1e6)
	}
	return fmt.Sprintf("%.0fM", v/1e6)
}

// timeLeft rounds seconds to the unit a person would use.
func timeLeft(s float64) string {
	switch {
	case s < 1:
		return "1 s"
	case s < 90:
		return fmt.Sprintf("%.0f s", s)
	case s < 90*60:
		return fmt.Sprintf("%.0f min", s/60)
	}
	return fmt.Sprintf("%.0f h", s/3600)
}
