package main

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"strconv"
	"strings"
	"syscall"
	"time"

	"nightjar"
	"nightjar/bench"
)

// benchRun runs one setting as a child process (so its peak memory is its
// own), measuring its wall time, its peak memory, the load average when it
// began and the CPU other processes used while it ran, and reads its
// report (nil when the run failed).
func benchRun(self, runDir string, c combo) (bench.Result, *nightjar.Report) {
	nan := math.NaN()
	res := bench.Result{Values: append([]string{}, c.values...), Recall: nan, Trust: nan, Cont: nan, Preserve: nan, LabelAcc: nan, InputAcc: nan,
		KL: nan, IterSecs: nan, AffSecs: nan, Centroid: nan, Load: loadNow(), OtherCPU: nan}
	_ = os.RemoveAll(runDir)
	args := []string{"embed", "--input", c.s.Input, "--run", runDir, "--quiet",
		"--threads", strconv.Itoa(c.r.Threads), "--score-sample", strconv.Itoa(c.r.ScoreSample)}
	args = append(args, settingsArgs(c.s)...)
	cmd := exec.Command(self, args...)
	var errb bytes.Buffer
	cmd.Stderr = &errb
	busy0, busyErr := bench.BusyCPU()
	start := time.Now()
	err := cmd.Run()
	res.Seconds = time.Since(start).Seconds()
	if busy1, err1 := bench.BusyCPU(); busyErr == nil && err1 == nil && cmd.ProcessState != nil && res.Seconds > 0 {
		own := (cmd.ProcessState.UserTime() + cmd.ProcessState.SystemTime()).Seconds()
		res.OtherCPU = math.Max(0, (busy1-busy0-own)/res.Seconds)
	}
	if cmd.ProcessState != nil {
		if ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage); ok {
			res.PeakMem = ru.Maxrss * 1024 // Linux reports KiB
		}
	}
	if err != nil {
		res.Err = strings.TrimSpace(strings.ReplaceAll(errb.String(), "\n", " "))
		if res.Err == "" {
			res.Err = err.Error()
		}
		return res, nil
	}
	rep, err := nightjar.ReadReport(filepath.Join(runDir, nightjar.FileReport))
	if err != nil {
		res.Err = "reading the run's report: " + err.Error()
		return res, nil
	}
	fillResult(&res, rep)
	return res, rep
}

// fillResult copies a report's figures into a sweep result.
func fillResult(res *bench.Result, rep *nightjar.Report) {
	res.Rows, res.KNNSecs, res.OptSecs, res.KL = rep.Rows, rep.Neighbours.Seconds, rep.Optimiser.Seconds, rep.Optimiser.KL
	if res.PeakMem <= 0 {
		res.PeakMem = rep.PeakMemoryBytes
	}
	res.AffSecs = rep.Affinities.Seconds
	if rep.Optimiser.Iterations > 0 {
		res.IterSecs = rep.Optimiser.Seconds / float64(rep.Optimiser.Iterations)
	}
	if rep.Neighbours.Recall != nil {
		res.Recall = *rep.Neighbours.Recall
	}
	if q := rep.Quality; q != nil {
		res.Trust, res.Cont, res.Preserve, res.KL = q.Trustworthiness, q.Continuity, q.Preservation, q.KL
		if q.LabelAccuracyMap != nil {
			res.LabelAcc, res.InputAcc = *q.LabelAccuracyMap, *q.LabelAccuracyInput
		}
		if q.CentroidRank != nil {
			res.Centroid = *q.CentroidRank
		}
	}
}

// settingsArgs turns settings back into embed options: every option of
// Settings but the input, as the library names it.
func settingsArgs(s nightjar.Settings) []string {
	var a []string
	for _, o := range nightjar.SettingOptions() {
		if o.Name == "input" {
			continue
		}
		v, _ := s.Get(o.Name)
		if v == "" || (o.Kind == "bool" && v == "false") {
			continue
		}
		if o.Kind == "bool" {
			a = append(a, "--"+o.Name)
			continue
		}
		a = append(a, "--"+o.Name, v)
	}
	return a
}

// loadNow is the machine's 1-minute load average, NaN where unknown.
func loadNow() float64 {
	la, err := bench.LoadAverage()
	if err != nil {
		return math.NaN()
	}
	return la[0]
}

// maxOther is the most CPU other processes used during any one run.
func maxOther(rs []bench.Result) float64 {
	m := math.NaN()
	for _, r := range rs {
		if !math.IsNaN(r.OtherCPU) && (math.IsNaN(m) || r.OtherCPU > m) {
			m = r.OtherCPU
		}
	}
	return m
}

// shedMemory hands the memory this process no longer uses back to the
// system and resets its peak resident set size to what it now holds (Linux
// 4.0 or later: writing 5 to /proc/self/clear_refs, proc(5)). It returns a
// warning when the peak stays above 100 MiB. Linux starts the peak of a
// child (ru_maxrss) at its parent's peak when the child is started (Go
// starts children with vfork, and exec keeps the larger of the two), so
// without the reset every run's peak memory would read at least the
// bench's own, which held the whole table while preparing the data.
func shedMemory() string {
	runtime.GC()
	debug.FreeOSMemory()
	_ = os.WriteFile("/proc/self/clear_refs", []byte("5"), 0)
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return ""
	}
	if peak := ru.Maxrss * 1024; peak > 100<<20 {
		return fmt.Sprintf("Warning: the bench itself peaked at %.0f MiB and could not reset its peak (/proc/self/clear_refs); each run's peak memory reads at least that much.", float64(peak)/(1<<20))
	}
	return ""
}
