package main

import (
	"io"
	"os"
	"time"

	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"
	"golang.org/x/term"
)

// isTerminal reports whether w is a terminal. Progress bars are drawn only
// on a terminal: never into a pipe, a file or a test buffer.
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}

// quietFlag is the root's persistent flag that silences progress bars.
const quietFlag = "quiet"

// progressBar draws bytes done, rate and time left on stderr while a
// library call reports progress. A nil *progressBar draws nothing.
type progressBar struct {
	label string
	w     io.Writer
	bar   *progressbar.ProgressBar
}

// newProgressBar returns a bar labelled label on cmd's stderr, or nil when
// stderr is not a terminal or --quiet is set.
func newProgressBar(cmd *cobra.Command, label string) *progressBar {
	if quiet, _ := cmd.Flags().GetBool(quietFlag); quiet || !isTerminal(cmd.ErrOrStderr()) {
		return nil
	}
	return &progressBar{label: label, w: cmd.ErrOrStderr()}
}

// callback is the Progress option for pack.Build and verify.Run: nil when
// no bar is drawn.
func (p *progressBar) callback() func(done, total int64) {
	if p == nil {
		return nil
	}
	return p.update
}

func (p *progressBar) update(done, total int64) {
	if p.bar == nil {
		p.bar = progressbar.NewOptions64(total,
			progressbar.OptionSetWriter(p.w),
			progressbar.OptionSetDescription(p.label),
			progressbar.OptionSetWidth(30),
			progressbar.OptionShowCount(),          // bytes done of total
			progressbar.OptionShowBytes(true),      // as bytes, with the rate
			progressbar.OptionSetPredictTime(true), // elapsed and time left
			progressbar.OptionUseIECUnits(true),
			progressbar.OptionThrottle(100*time.Millisecond),
			progressbar.OptionClearOnFinish(),
		)
	}
	_ = p.bar.Set64(done) // a failed write to stderr must not fail the work
}

// finish removes the bar, so that what follows starts on a clean line.
func (p *progressBar) finish() {
	if p == nil || p.bar == nil {
		return
	}
	if !p.bar.IsFinished() {
		_ = p.bar.Clear()
	}
}
