package bench

import (
	"math"
	"strings"
	"testing"
)

func TestParseLoadAverage(t *testing.T) {
	// The format of proc(5): three load averages, running/total, last pid.
	la, err := ParseLoadAverage(strings.NewReader("0.52 1.58 2.59 1/467 12345\n"))
	if err != nil || la != [3]float64{0.52, 1.58, 2.59} {
		t.Errorf("got %v, %v", la, err)
	}
	if _, err := ParseLoadAverage(strings.NewReader("0.5\n")); err == nil {
		t.Error("a short line should fail")
	}
	if _, err := ParseLoadAverage(strings.NewReader("a b c\n")); err == nil {
		t.Error("text should fail")
	}
}

func TestParseBusyCPU(t *testing.T) {
	// proc(5): cpu user nice system idle iowait irq softirq steal guest guest_nice, in USER_HZ.
	stat := "cpu  1000 20 300 90000 500 7 3 10 0 0\ncpu0 500 10 150 45000 250 3 1 5 0 0\nintr 1 2\n"
	got, err := ParseBusyCPU(strings.NewReader(stat))
	if want := (1000 + 20 + 300 + 7 + 3 + 10) / 100.0; err != nil || math.Abs(got-want) > 1e-12 {
		t.Errorf("got %g, %v; want %g", got, err, want)
	}
	if _, err := ParseBusyCPU(strings.NewReader("intr 1\n")); err == nil {
		t.Error("no cpu line should fail")
	}
}

func TestLoadNotes(t *testing.T) {
	cases := []struct {
		start, end, other float64
		want              []string
	}{
		{0.1, 1.9, 0.05, nil},                           // the sweep's own two threads
		{1.2, 1.5, math.NaN(), []string{"busy when"}},   // busy from the start
		{0.1, 3.5, 0.05, []string{"rose from 0.10"}},    // something started
		{3.0, 1.0, 0.05, []string{"busy", "fell from"}}, // something finished
		{0.1, 1.0, 0.9, []string{"0.90 cores"}},
	}
	for _, c := range cases {
		notes := LoadNotes(c.start, c.end, 2, c.other)
		if len(notes) != len(c.want) {
			t.Errorf("%+v: notes %q", c, notes)
			continue
		}
		for i, w := range c.want {
			if !strings.Contains(notes[i], w) {
				t.Errorf("%+v: note %q lacks %q", c, notes[i], w)
			}
		}
	}
	if n := LoadNotes(math.NaN(), 1, 2, 0); len(n) != 1 || !strings.Contains(n[0], "could not be read") {
		t.Errorf("unknown load: %q", n)
	}
}
