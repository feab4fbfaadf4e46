package transfer

import (
	"io"
	"os"
	"time"

	"github.com/schollz/progressbar/v3"
)

// Progress is told how many records were done; Finish ends the display.
type Progress interface {
	Add(n int)
	Finish()
}

// Silent is a Progress that shows nothing.
type Silent struct{}

// Add implements Progress.
func (Silent) Add(int) {}

// Finish implements Progress.
func (Silent) Finish() {}

type bar struct{ b *progressbar.ProgressBar }

func (p bar) Add(n int) { p.b.Add(n) }
func (p bar) Finish()   { p.b.Finish() }

// NewProgress returns a progress bar on f (records done of total, rate,
// time left) when f is a terminal, and a silent Progress otherwise.
func NewProgress(f *os.File, total int64, what string) Progress {
	if f == nil || total <= 0 || !isTerminal(f) {
		return Silent{}
	}
	return bar{progressbar.NewOptions64(total,
		progressbar.OptionSetWriter(f),
		progressbar.OptionSetDescription(what),
		progressbar.OptionShowCount(),
		progressbar.OptionShowIts(),
		progressbar.OptionSetItsString("records"),
		progressbar.OptionSetPredictTime(true),
		progressbar.OptionThrottle(100*time.Millisecond),
		progressbar.OptionOnCompletion(func() { io.WriteString(f, "\n") }),
	)}
}

func isTerminal(f *os.File) bool {
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}
