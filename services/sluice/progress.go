package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"time"
)

// progressBar draws a one-line bar on a terminal; on anything else it
// prints nothing until done.
type progressBar struct {
	w     io.Writer
	label string
	tty   bool
	start time.Time
	last  time.Time
}

func newProgressBar(w io.Writer, label string) *progressBar {
	tty := false
	if f, ok := w.(*os.File); ok {
		if fi, err := f.Stat(); err == nil && fi.Mode()&os.ModeCharDevice != 0 {
			tty = true
		}
	}
	return &progressBar{w: w, label: label, tty: tty, start: time.Now()}
}

// update shows done of total units, with rate and time left.
func (p *progressBar) update(done, total int64) {
	if !p.tty || total <= 0 || (time.Since(p.last) < 100*time.Millisecond && done < total) {
		return
	}
	p.last = time.Now()
	frac := float64(done) / float64(total)
	const width = 30
	n := int(frac * width)
	el := time.Since(p.start).Seconds()
	eta := "—"
	if done > 0 {
		eta = (time.Duration(el/frac*(1-frac)) * time.Second).Round(time.Second).String()
	}
	fmt.Fprintf(p.w, "\r%s [%s%s] %3.0f%%  %d/%d  %.1f/s  ETA %s ", p.label, strings.Repeat("█", n), strings.Repeat("·", width-n),
		100*frac, done, total, float64(done)/max(el, 1e-9), eta)
}

func (p *progressBar) done() {
	if p.tty {
		fmt.Fprintln(p.w)
	}
}
