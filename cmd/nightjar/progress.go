package main

import (
	"fmt"
	"io"
	"os"
	"sync"
	"time"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"
)

// ui shows a run's progress on stderr. On a terminal it draws a bar per
// phase; otherwise (a batch job's log file) it writes timestamped lines: one
// when a phase starts and ends, and for long phases one every logEvery with
// the progress, the rate and the time left. Notes (the one-line summary of
// each phase) and warnings always print, with a timestamp in a log; --quiet
// drops the bars and the progress lines. It is the command line's
// nightjar.Observer.
type ui struct {
	w     io.Writer
	quiet bool
	tty   bool
	mu    sync.Mutex
	bar   *progressbar.ProgressBar

	// log mode: the open phase
	phase      string
	detail     string
	done, tot  int64
	started    time.Time
	lastDone   int64
	lastLineAt time.Time
}

// logEvery is how often a log line reports a long phase's progress.
const logEvery = time.Minute

// newUI returns the ui for stderr w: bars when w is a terminal.
func newUI(w io.Writer, quiet bool) *ui {
	tty := false
	if f, ok := w.(*os.File); ok {
		tty = term.IsTerminal(int(f.Fd()))
	}
	return &ui{w: w, quiet: quiet, tty: tty}
}

// stamp prefixes a log line with the time.
func (u *ui) stamp() string {
	if u.tty {
		return ""
	}
	return time.Now().Format("2006-01-02T15:04:05Z07:00") + " "
}

// Note prints one line of information, closing any open bar first.
func (u *ui) Note(text string) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	fmt.Fprintln(u.w, u.stamp()+text)
}

// Warn prints a warning line.
func (u *ui) Warn(text string) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	fmt.Fprintln(u.w, u.stamp()+"nightjar: warning: "+text)
}

// closeLocked closes an open bar, leaving it where it stood (an
// interrupted phase does not jump to 100 %).
func (u *ui) closeLocked() {
	if u.bar != nil {
		if u.bar.State().CurrentNum >= u.bar.GetMax64() && u.bar.GetMax64() > 0 {
			_ = u.bar.Finish()
		} else {
			_ = u.bar.Exit()
		}
		fmt.Fprintln(u.w)
		u.bar = nil
	}
}

// Done ends the open phase.
func (u *ui) Done() {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	u.endPhaseLocked()
}

func (u *ui) endPhaseLocked() {
	if u.phase == "" {
		return
	}
	if !u.tty && !u.quiet {
		what := "ended"
		if u.tot > 0 && u.done >= u.tot {
			what = "finished"
		}
		fmt.Fprintf(u.w, "%s%s: %s after %s\n", u.stamp(), u.phase, what, time.Since(u.started).Round(100*time.Millisecond))
	}
	u.phase = ""
}

// Phase opens a phase of total steps (−1 when unknown).
func (u *ui) Phase(desc string, total int64) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.closeLocked()
	u.endPhaseLocked()
	u.phase, u.detail, u.done, u.tot = desc, "", 0, total
	u.started, u.lastLineAt, u.lastDone = time.Now(), time.Now(), 0
	if u.quiet {
		return
	}
	if !u.tty {
		fmt.Fprintf(u.w, "%s%s: started\n", u.stamp(), desc)
		return
	}
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

// Progress records done of total steps of the open phase.
func (u *ui) Progress(done, total int64) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.done = done
	if total > 0 {
		u.tot = total
	}
	if u.quiet {
		return
	}
	if u.bar != nil {
		if total > 0 && total != u.bar.GetMax64() {
			u.bar.ChangeMax64(total)
		}
		_ = u.bar.Set64(done)
		return
	}
	if !u.tty && u.phase != "" && time.Since(u.lastLineAt) >= logEvery {
		fmt.Fprintln(u.w, u.stamp()+u.progressLine())
		u.lastLineAt, u.lastDone = time.Now(), done
	}
}

// progressLine describes the open phase's progress for a log.
func (u *ui) progressLine() string {
	el := time.Since(u.started).Seconds()
	rate := float64(u.done) / max(el, 1e-9)
	line := fmt.Sprintf("%s: %d", u.phase, u.done)
	if u.tot > 0 {
		line += fmt.Sprintf(" of %d (%.0f%%)", u.tot, 100*float64(u.done)/float64(u.tot))
	}
	line += fmt.Sprintf(", %.3g per second", rate)
	if u.tot > 0 && rate > 0 {
		left := time.Duration(float64(u.tot-u.done) / rate * float64(time.Second))
		line += ", about " + left.Round(time.Second).String() + " left"
	}
	if u.detail != "" {
		line += "; " + u.detail
	}
	return line
}

// Detail changes the open phase's description (e.g. to show the current KL).
func (u *ui) Detail(desc string) {
	u.mu.Lock()
	defer u.mu.Unlock()
	u.detail = desc
	if u.bar != nil {
		u.bar.Describe(desc)
	}
}

// DetailWanted spares a quiet run the work of computing details.
func (u *ui) DetailWanted() bool { return !u.quiet }
