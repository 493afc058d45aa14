package cohort

import (
	"fmt"
	"io"
	"os"
	"sync"
	"time"

	"github.com/vbauerster/mpb/v8"
	"github.com/vbauerster/mpb/v8/decor"
)

// progress reports finished cases: a bar with the rate and ETA on a
// terminal (mpb), one plain line per case otherwise.
type progress struct {
	mu      sync.Mutex
	w       io.Writer
	total   int
	done    int
	start   time.Time
	scored  int // cases scored in this run (for the ETA)
	pool    *mpb.Progress
	bar     *mpb.Bar
	lastEnd time.Time
}

// IsTerminal says whether w is a character device (a terminal).
func IsTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

func newProgress(w io.Writer, total int, terminal bool) *progress {
	p := &progress{w: w, total: total, start: time.Now(), lastEnd: time.Now()}
	if w == nil {
		p.w = io.Discard
		return p
	}
	if terminal {
		p.pool = mpb.New(mpb.WithOutput(w), mpb.WithWidth(48), mpb.WithAutoRefresh())
		p.bar = p.pool.AddBar(int64(total),
			mpb.PrependDecorators(decor.Name("sweep "), decor.CountersNoUnit("%d/%d cases")),
			mpb.AppendDecorators(decor.OnComplete(decor.EwmaETA(decor.ET_STYLE_GO, 30, decor.WCSyncSpace), "done")))
	}
	return p
}

// caseDone reports one finished case; skipped cases do not count towards
// the rate.
func (p *progress) caseDone(name, what string, skipped bool) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.done++
	now := time.Now()
	if !skipped {
		p.scored++
	}
	if p.bar != nil {
		if skipped {
			p.bar.Increment()
		} else {
			p.bar.EwmaIncrement(now.Sub(p.lastEnd))
		}
		p.lastEnd = now
		return
	}
	eta := ""
	if p.scored > 0 && p.done < p.total {
		per := time.Since(p.start) / time.Duration(p.scored)
		eta = fmt.Sprintf(", about %s left", (per * time.Duration(p.total-p.done)).Round(time.Second))
	}
	fmt.Fprintf(p.w, "[%d/%d] %s: %s%s\n", p.done, p.total, name, what, eta)
}

// finish stops the bar.
func (p *progress) finish() {
	if p.pool != nil {
		if p.bar != nil && !p.bar.Completed() {
			p.bar.Abort(false)
		}
		p.pool.Wait()
	}
}
