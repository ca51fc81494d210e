package bench

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
)

// LoadAverage returns the 1-, 5- and 15-minute load averages of the
// machine from /proc/loadavg (Linux), or an error where there is none.
func LoadAverage() ([3]float64, error) {
	f, err := os.Open("/proc/loadavg")
	if err != nil {
		return [3]float64{}, err
	}
	defer f.Close()
	return ParseLoadAverage(f)
}

// ParseLoadAverage reads the first three fields of a /proc/loadavg
// ("0.52 0.58 0.59 1/467 12345").
func ParseLoadAverage(r io.Reader) ([3]float64, error) {
	var la [3]float64
	b, err := io.ReadAll(io.LimitReader(r, 4096))
	if err != nil {
		return la, err
	}
	fs := strings.Fields(string(b))
	if len(fs) < 3 {
		return la, fmt.Errorf("load average: want three numbers, got %q", string(b))
	}
	for i := range la {
		if la[i], err = strconv.ParseFloat(fs[i], 64); err != nil {
			return la, fmt.Errorf("load average: %w", err)
		}
	}
	return la, nil
}

// clockTicks is USER_HZ, the unit of /proc/stat: 100 per second on every
// Linux architecture the Go toolchain targets (common practice; it is
// fixed by the kernel's ABI, sysconf(_SC_CLK_TCK)).
const clockTicks = 100

// BusyCPU returns the CPU seconds the whole machine has spent busy since it
// started (all cores: user, nice, system, irq, softirq and steal time of
// /proc/stat's "cpu" line), or an error where there is none. The
// difference of two readings, less a process's own CPU time, is what other
// processes used meanwhile.
func BusyCPU() (float64, error) {
	f, err := os.Open("/proc/stat")
	if err != nil {
		return 0, err
	}
	defer f.Close()
	return ParseBusyCPU(f)
}

// ParseBusyCPU reads the busy seconds from a /proc/stat.
func ParseBusyCPU(r io.Reader) (float64, error) {
	sc := bufio.NewScanner(r)
	for sc.Scan() {
		fs := strings.Fields(sc.Text())
		if len(fs) < 9 || fs[0] != "cpu" {
			continue
		}
		var busy float64
		// user nice system idle iowait irq softirq steal: skip idle, iowait.
		for _, i := range []int{1, 2, 3, 6, 7, 8} {
			v, err := strconv.ParseFloat(fs[i], 64)
			if err != nil {
				return 0, fmt.Errorf("/proc/stat: %w", err)
			}
			busy += v
		}
		return busy / clockTicks, nil
	}
	if err := sc.Err(); err != nil {
		return 0, err
	}
	return 0, fmt.Errorf("/proc/stat: no cpu line")
}

// LoadNotes returns warnings about the machine's load around a sweep: the
// 1-minute load averages before the first run (start) and after the last
// (end), the threads each run used (own: the most load the sweep itself
// adds) and the most cores other processes kept busy during any one run
// (otherCPU, NaN when unknown). A load above 0.5 at the start means other
// programs were running; a load at the end that exceeds the start by more
// than own + 0.5, or falls below it by more than 0.5, means the load
// changed while the sweep ran, so early and late runs met different
// machines; other processes averaging above a quarter of a core during a
// run slowed it. These thresholds are common practice for a shared
// machine, not a standard.
func LoadNotes(start, end float64, own int, otherCPU float64) []string {
	var notes []string
	if math.IsNaN(start) || math.IsNaN(end) {
		return []string{"The load average could not be read (not Linux?): nothing tells whether other programs shared the machine."}
	}
	if start > 0.5 {
		notes = append(notes, fmt.Sprintf("Warning: the machine was busy when the sweep began (load average %.2f): other programs were running, and times are upper bounds.", start))
	}
	switch {
	case end > start+float64(own)+0.5:
		notes = append(notes, fmt.Sprintf("Warning: the load average rose from %.2f to %.2f, more than this sweep's own %d thread(s) explain: other programs started while it ran, so later runs met a busier machine.", start, end, own))
	case end < start-0.5:
		notes = append(notes, fmt.Sprintf("Warning: the load average fell from %.2f to %.2f: programs running at the start finished while the sweep ran, so earlier runs met a busier machine.", start, end))
	}
	if otherCPU > 0.25 {
		notes = append(notes, fmt.Sprintf("Warning: other processes kept up to %.2f cores busy during a run (column other CPU); compare medians of several --repeat runs.", otherCPU))
	}
	return notes
}
