package main

import (
	"fmt"
	"strings"
	"sync"
	"time"
)

// bar draws a one-line progress bar on a terminal; elsewhere it draws
// nothing, so logs and pipes stay clean. It is safe for concurrent use.
type bar struct {
	e     *env
	label string // drawn before the bar, may be empty
	unit  string // what is counted, e.g. "points" or "frames"
	start time.Time
	done0 int // items already done when the bar started (a resumed run)
	mu    sync.Mutex
	last  time.Time
	drawn bool
}

func newBar(e *env, label, unit string) *bar {
	return &bar{e: e, label: label, unit: unit, start: time.Now()}
}

// update draws done of total; it has the signature of the progress
// callbacks of the analysis packages.
func (p *bar) update(done, total int) { p.show(done, total, "") }

// show draws done of total with a note after the bar, at most ten times a
// second except for the last update.
func (p *bar) show(done, total int, note string) {
	if !p.e.tty || total <= 0 {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	now := time.Now()
	if now.Sub(p.last) < 100*time.Millisecond && done < total {
		return
	}
	p.last = now
	const width = 28
	n := min(width, max(0, int(float64(done)/float64(total)*width)))
	rate, left := 0.0, "--"
	if d, el := done-p.done0, now.Sub(p.start).Seconds(); d > 0 && el > 0 {
		rate = float64(d) / el
		left = time.Duration(float64(total-done) / rate * float64(time.Second)).Round(time.Second).String()
	}
	prefix := ""
	if p.label != "" {
		prefix = p.label + " "
	}
	rateFmt := "%.0f"
	if rate < 10 {
		rateFmt = "%.2f"
	}
	fmt.Fprintf(p.e.stderr, "\r%s[%s%s] %d/%d %s  "+rateFmt+" %s/s  %s left  %-14s", prefix,
		strings.Repeat("#", n), strings.Repeat(".", width-n), done, total, p.unit, rate, p.unit, left, note)
	p.drawn = true
}

// done ends the bar's line.
func (p *bar) done() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.drawn {
		fmt.Fprintln(p.e.stderr)
		p.drawn = false
	}
}
