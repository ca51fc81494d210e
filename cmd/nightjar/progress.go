package main

import (
	"fmt"
	"io"
	"sync"
	"time"

	"github.com/schollz/progressbar/v3"
)

// ui shows a run's progress on stderr: a bar per phase and notes, or only
// warnings when quiet. It is the command line's nightjar.Observer.
type ui struct {
	w     io.Writer
	quiet bool
	mu    sync.Mutex
	bar   *progressbar.ProgressBar
}

// Note prints one line of information, closing any open bar first. Quiet
// runs print no notes: errors and the final summary go elsewhere.
func (u *ui) Note(text string) {
	if u.quiet {
		return
	}
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	fmt.Fprintln(u.w, text)
}

// Warn prints a warning line, even when quiet.
func (u *ui) Warn(text string) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	fmt.Fprintln(u.w, "nightjar: warning: "+text)
}

func (u *ui) closeLocked() {
	if u.bar != nil {
		_ = u.bar.Finish()
		fmt.Fprintln(u.w)
		u.bar = nil
	}
}

// Done closes the open bar.
func (u *ui) Done() {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
}

// Phase opens a bar for a phase of total steps (−1 when unknown).
func (u *ui) Phase(desc string, total int64) {
	if u.quiet {
		return
	}
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	u.bar = progressbar.NewOptions64(total,
		progressbar.OptionSetWriter(u.w),
		progressbar.OptionSetDescription(desc),
		progressbar.OptionSetWidth(30),
		progressbar.OptionShowCount(),
		progressbar.OptionSetPredictTime(true),
		progressbar.OptionThrottle(200*time.Millisecond),
		progressbar.OptionSetRenderBlankState(true),
		progressbar.OptionUseANSICodes(false),
	)
}

// Progress moves the open bar to done of total.
func (u *ui) Progress(done, total int64) {
	if u.quiet {
		return
	}
	u.mu.Lock()
	defer u.mu.Unlock()
	if u.bar == nil {
		return
	}
	if total > 0 && total != u.bar.GetMax64() {
		u.bar.ChangeMax64(total)
	}
	_ = u.bar.Set64(done)
}

// Detail changes the open bar's description (e.g. to show the current KL).
func (u *ui) Detail(desc string) {
	u.mu.Lock()
	defer u.mu.Unlock()
	if u.bar != nil {
		u.bar.Describe(desc)
	}
}

// DetailWanted spares a quiet run the work of computing details.
func (u *ui) DetailWanted() bool { return !u.quiet }
