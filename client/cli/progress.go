package cli

import (
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

// progress shows a scan's progress: a redrawn bar on a terminal, a plain
// line every few seconds otherwise (logs, CI).
type progress struct {
	w        io.Writer
	tty      bool
	total    uint64
	channels []string
	done_    uint64
	start    time.Time
	startSeq uint64
	lastDraw time.Time
	last     *glissv1.Point
	drawn    bool
}

func newProgress(w io.Writer) *progress {
	p := &progress{w: w, start: time.Now()}
	if f, ok := w.(*os.File); ok {
		if fi, err := f.Stat(); err == nil && fi.Mode()&os.ModeCharDevice != 0 && os.Getenv("TERM") != "dumb" {
			p.tty = true
		}
	}
	return p
}

func (p *progress) setTotal(n uint64, channels []string) {
	p.total = n
	if len(channels) > 0 {
		p.channels = channels
	}
}

func (p *progress) point(pt *glissv1.Point) {
	if p.last == nil {
		p.startSeq = pt.Seq
		p.start = time.Now()
	}
	p.last = pt
	p.done_ = pt.Seq + 1
	now := time.Now()
	interval := 5 * time.Second
	if p.tty {
		interval = 100 * time.Millisecond
	}
	if now.Sub(p.lastDraw) >= interval || p.done_ == p.total {
		p.draw(now)
	}
}

func (p *progress) eta(now time.Time) string {
	n := p.done_ - p.startSeq
	if n == 0 || p.total <= p.done_ {
		return "0s"
	}
	per := now.Sub(p.start) / time.Duration(n)
	return (per * time.Duration(p.total-p.done_)).Round(time.Second).String()
}

func (p *progress) counts() string {
	if p.last == nil {
		return ""
	}
	var parts []string
	for i, c := range p.last.Counts {
		name := fmt.Sprint(i)
		if i < len(p.channels) {
			name = p.channels[i]
		}
		parts = append(parts, fmt.Sprintf("%s=%d", name, c))
	}
	return strings.Join(parts, " ")
}

func (p *progress) draw(now time.Time) {
	p.lastDraw = now
	pct := 0.0
	if p.total > 0 {
		pct = 100 * float64(p.done_) / float64(p.total)
	}
	if p.tty {
		const width = 30
		fill := int(pct / 100 * width)
		bar := strings.Repeat("█", fill) + strings.Repeat("·", width-fill)
		fmt.Fprintf(p.w, "\r\033[K%s %5.1f%% %d/%d  ETA %s  last: %s", bar, pct, p.done_, p.total, p.eta(now), p.counts())
		p.drawn = true
		return
	}
	fmt.Fprintf(p.w, "progress: %d/%d points (%.0f%%), ETA %s, last point %s\n", p.done_, p.total, pct, p.eta(now), p.counts())
}

// line prints a message without breaking the bar.
func (p *progress) line(msg string) {
	if p.tty && p.drawn {
		fmt.Fprint(p.w, "\r\033[K")
	}
	fmt.Fprintln(p.w, msg)
	if p.tty && p.drawn {
		p.draw(time.Now())
	}
}

func (p *progress) done() {
	if p.last != nil && p.lastDraw.IsZero() {
		p.draw(time.Now())
	}
	if p.tty && p.drawn {
		fmt.Fprintln(p.w)
		p.drawn = false
	}
}
