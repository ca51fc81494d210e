package main

import (
	"fmt"
	"io"
	"sync"
	"time"

	"github.com/schollz/progressbar/v3"
)

// ui prints progress bars and notes on stderr, or only notes when quiet.
type ui struct {
	w     io.Writer
	quiet bool
	mu    sync.Mutex
	bar   *progressbar.ProgressBar
}

// note prints one line of information, closing any open bar first. Quiet
// runs print no notes: errors and the final summary go elsewhere.
func (u *ui) note(format string, args ...any) {
	if u.quiet {
		return
	}
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	fmt.Fprintf(u.w, format+"\n", args...)
}

// warn prints a warning line, even when quiet.
func (u *ui) warn(format string, args ...any) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	fmt.Fprintf(u.w, "nightjar: warning: "+format+"\n", args...)
}

func (u *ui) closeLocked() {
	if u.bar != nil {
		_ = u.bar.Finish()
		fmt.Fprintln(u.w)
		u.bar = nil
	}
}

// done closes the open bar.
func (u *ui) done() {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
}

// phase opens a bar for a phase of total steps (−1 when unknown) and returns a
// callback that reports (done, total). The callback is safe for concurrent use.
func (u *ui) phase(desc string, total int64) func(done, total int64) {
	if u.quiet {
		return func(int64, int64) {}
	}
	u.mu.Lock()
	u.closeLocked()
	bar := progressbar.NewOptions64(total,
		progressbar.OptionSetWriter(u.w),
		progressbar.OptionSetDescription(desc),
		progressbar.OptionSetWidth(30),
		progressbar.OptionShowCount(),
		progressbar.OptionSetPredictTime(true),
		progressbar.OptionThrottle(200*time.Millisecond),
		progressbar.OptionSetRenderBlankState(true),
		progressbar.OptionUseANSICodes(false),
	)
	u.bar = bar
	u.mu.Unlock()
	return func(done, t int64) {
		u.mu.Lock()
		defer u.mu.Unlock()
		if u.bar != bar {
			return
		}
		if t > 0 && t != bar.GetMax64() {
			bar.ChangeMax64(t)
		}
		_ = bar.Set64(done)
	}
}

// describe changes the open bar's description (e.g. to show the current KL).
func (u *ui) describe(desc string) {
	u.mu.Lock()
	defer u.mu.Unlock()
	if u.bar != nil {
		u.bar.Describe(desc)
	}
}
