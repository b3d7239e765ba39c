package main

import (
	"sync"
	"time"

	"github.com/schollz/progressbar/v3"
)

// progress reports rows scored: a bar with rows/s and ETA when stderr is a
// terminal, a log line every logEvery otherwise, nothing with --quiet.
type progress struct {
	env   *Env
	bar   *progressbar.ProgressBar
	mu    sync.Mutex
	rows  int64
	total int64
	start time.Time
	last  time.Time
}

const logEvery = 10 * time.Second

func newProgress(env *Env, total int64) *progress {
	p := &progress{env: env, total: total, start: time.Now()}
	p.last = p.start
	if env.Quiet || !env.stderrIsTerminal() {
		return p
	}
	max := total
	if max <= 0 {
		max = -1 // unknown: a spinner
	}
	p.bar = progressbar.NewOptions64(max,
		progressbar.OptionSetWriter(env.Stderr),
		progressbar.OptionSetDescription("scoring"),
		progressbar.OptionShowCount(),
		progressbar.OptionShowIts(),
		progressbar.OptionSetItsString("rows"),
		progressbar.OptionThrottle(200*time.Millisecond),
		progressbar.OptionSetPredictTime(true),
		progressbar.OptionClearOnFinish(),
	)
	return p
}

// Tracker returns the engine's progress callback for one input: the engine
// reports rows done within that input, cumulatively.
func (p *progress) Tracker() func(rows int64) {
	p.mu.Lock()
	base := p.rows
	p.mu.Unlock()
	return func(rows int64) { p.set(base + rows) }
}

func (p *progress) set(rows int64) {
	p.mu.Lock()
	defer p.mu.Unlock()
	n := rows - p.rows
	p.rows = rows
	if p.bar != nil {
		p.bar.Add64(n)
		return
	}
	if p.env.Quiet {
		return
	}
	if now := time.Now(); now.Sub(p.last) >= logEvery {
		p.last = now
		rate := float64(p.rows) / now.Sub(p.start).Seconds()
		if p.total > 0 {
			eta := time.Duration(float64(p.total-p.rows)/rate) * time.Second
			p.env.Logf("heft score: %d of %d rows (%.0f%%), %.0f rows/s, about %s left", p.rows, p.total, 100*float64(p.rows)/float64(p.total), rate, eta.Round(time.Second))
		} else {
			p.env.Logf("heft score: %d rows, %.0f rows/s", p.rows, rate)
		}
	}
}

// Finish clears the bar and logs the total.
func (p *progress) Finish() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.bar != nil {
		p.bar.Finish()
	}
	secs := time.Since(p.start).Seconds()
	p.env.Logf("heft score: %d rows in %.1fs (%.0f rows/s)", p.rows, secs, float64(p.rows)/max(secs, 1e-9))
}
