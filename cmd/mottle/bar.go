package main

import (
	"fmt"
	"strings"
	"sync"
	"time"
)

// bar draws a one-line progress bar on a terminal; elsewhere it draws
// nothing, so logs and pipes stay clean.
type bar struct {
	e     *env
	label string
	start time.Time
	mu    sync.Mutex
	last  time.Time
	drawn bool
}

func newBar(e *env, label string) *bar {
	return &bar{e: e, label: label, start: time.Now()}
}

// update draws done of total, at most ten times a second.
func (p *bar) update(done, total int) {
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
	const width = 30
	frac := float64(done) / float64(total)
	n := int(frac * width)
	rate := float64(done) / now.Sub(p.start).Seconds()
	eta := ""
	if rate > 0 && done < total {
		eta = fmt.Sprintf(", %s left", (time.Duration(float64(total-done)/rate) * time.Second).Round(time.Second))
	}
	fmt.Fprintf(p.e.stderr, "\r%s [%s%s] %d/%d (%.0f/s%s)  ", p.label, strings.Repeat("#", n), strings.Repeat(".", width-n), done, total, rate, eta)
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
