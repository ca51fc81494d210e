package nightjar

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// BenchmarkMapPageMillion writes map.html for 1,000,000 invented points in 12
// groups with 12-character ids, then loads it in headless Chromium (WebGL on
// SwiftShader) a few times and reports the file's size, the time of the
// first frame after the start of navigation (performance.now() in the page,
// after gl.finish), and the time from a mouse move's event to its answer in
// the tip (moves start 3 s after the first frame), medians over the loads and
// moves. Recorded in bench/RESULTS.md:
//
//	go test -run XXX -bench MapPageMillion -benchtime 1x -timeout 30m .
func BenchmarkMapPageMillion(b *testing.B) {
	const n = 1_000_000
	rng := rand.New(rand.NewPCG(3, 4))
	y := make([]float64, 2*n)
	labels := make([]string, n)
	ids := make([]string, n)
	for i := range n {
		g := i % 12
		r := 30 * (1 + float64(g%3)/3)
		y[2*i] = r*math.Cos(float64(g)) + 3*rng.NormFloat64()
		y[2*i+1] = r*math.Sin(float64(g)) + 3*rng.NormFloat64()
		labels[i] = fmt.Sprintf("population %d", g)
		ids[i] = fmt.Sprintf("cell-%07d", i) // 12 characters
	}
	v := MapView{Map: y, Dims: 2, IDs: &Column{Name: "cell", Strings: ids}, By: "population", Labels: labels, Title: "a million invented points"}
	dir := b.TempDir()
	path := filepath.Join(dir, FileMapPage)
	for b.Loop() {
		t0 := time.Now()
		f, err := os.Create(path)
		if err != nil {
			b.Fatal(err)
		}
		if err := WriteMapPage(f, v); err != nil {
			b.Fatal(err)
		}
		f.Close()
		b.ReportMetric(time.Since(t0).Seconds(), "write-s")
	}
	st, _ := os.Stat(path)
	b.ReportMetric(float64(st.Size())/1e6, "MB")
	bin := ""
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			bin = p
			break
		}
	}
	if bin == "" {
		b.Log("no Chromium: only the file was measured")
		return
	}
	opts := append(chromedp.DefaultExecAllocatorOptions[:], chromedp.ExecPath(bin), chromedp.NoSandbox,
		chromedp.WindowSize(1280, 800), chromedp.Flag("use-gl", "angle"), chromedp.Flag("use-angle", "swiftshader"),
		chromedp.Flag("enable-unsafe-swiftshader", true))
	actx, cancel := chromedp.NewExecAllocator(context.Background(), opts...)
	defer cancel()
	var first, hover, compute []float64
	for range 5 {
		ctx, cancel := chromedp.NewContext(actx)
		ctx, cancelT := context.WithTimeout(ctx, 2*time.Minute)
		err := chromedp.Do(ctx, chromedp.Navigate("file://"+path), chromedp.WaitVisible(chromedp.CSS("body[data-ready]")))
		if err != nil {
			b.Fatal(err)
		}
		ms, _ := chromedp.Run(ctx, chromedp.Evaluate[float64](`nightjar.firstFrameMs`))
		first = append(first, ms)
		marks, _ := chromedp.Run(ctx, chromedp.Evaluate[string](`JSON.stringify(nightjar.marks)`))
		b.Logf("load %d: first frame %.0f ms; stages (ms since navigation): %s", len(first), ms, marks)
		box, _ := chromedp.Run(ctx, chromedp.Evaluate[[]float64](stageBox))
		// The page keeps the main thread busy for a moment after its first
		// frame (the hover index, collecting the unpacked text); hovers
		// start once that is over, as a person's would.
		if err := chromedp.Do(ctx, chromedp.Sleep(3*time.Second)); err != nil {
			b.Fatal(err)
		}
		for k := range 20 {
			x, yy := box[0]+box[2]*(0.2+0.03*float64(k)), box[1]+box[3]*(0.5+0.02*float64(k%3))
			if err := chromedp.Do(ctx, chromedp.MouseEvent(chromedp.MouseMoved, x, yy)); err != nil {
				b.Fatal(err)
			}
		}
		times, _ := chromedp.Run(ctx, chromedp.Evaluate[[][]float64](`nightjar.hoverMs.map((h) => [h.sinceEvent, h.compute])`))
		line := ""
		for _, h := range times {
			hover, compute = append(hover, h[0]), append(compute, h[1])
			line += fmt.Sprintf(" %.1f", h[0])
		}
		b.Logf("load %d: hover answers (ms, event to tip):%s", len(first), line)
		cancelT()
		cancel()
	}
	b.ReportMetric(median(first), "first-frame-ms")
	b.ReportMetric(median(hover), "hover-ms")
	b.ReportMetric(median(compute), "hover-compute-ms")
	b.Logf("first frames (ms): %.0f; hover answers (ms, event to tip): median %.1f, max %.1f", first, median(hover), slices.Max(hover))
}

func median(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := slices.Clone(v)
	slices.Sort(s)
	return s[len(s)/2]
}
