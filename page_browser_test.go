package nightjar

import (
	"bytes"
	"context"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/cdproto/page"
	"github.com/chromedp/cdproto/runtime"
	"github.com/chromedp/chromedp"
)

// The browser test drives a real headless Chromium (Debian's chromium,
// which .ci/run installs) over map.html of a small run: once with WebGL
// (software, SwiftShader) and once with the canvas fallback. Under CI=true
// a browser that cannot be found or started fails the test; elsewhere the
// test is skipped with a message.

// xssLabel and xssID are labels and ids that must show as text.
const (
	xssLabel = `</script><img src=x onerror=alert(1)>`
	xssID    = `r"%d'<b>`
)

// browserPath finds Chromium, or fails (CI) or skips the test.
func browserPath(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome", "google-chrome-stable"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") == "true" {
		t.Fatal("no Chromium found (chromium, chromium-browser, google-chrome): .ci/run installs Debian's chromium")
	}
	t.Skip("no Chromium found: install it (apt-get install chromium) to run the browser tests")
	return ""
}

// browserRun embeds 300 invented rows in three groups, one labelled with
// xssLabel, every id holding quotes and angle brackets.
func browserRun(t *testing.T) (dir string, y []float64, labels []string) {
	t.Helper()
	x, lab := blobs(300, 5, 21)
	ids := make([]string, x.N)
	for i := range ids {
		ids[i] = fmt.Sprintf(xssID, i)
		if lab.Strings[i] == "b" {
			lab.Strings[i] = xssLabel
		}
	}
	s := DefaultSettings()
	s.Perplexity, s.Iterations, s.EarlyIterations = 15, 250, 60
	rt := DefaultRuntime()
	rt.ScoreSample = 0
	dir = filepath.Join(t.TempDir(), "run")
	res, err := Embed(context.Background(), FromMatrix(x, &Column{Name: "cell", Strings: ids}, lab), dir, s, rt, nil)
	if err != nil {
		t.Fatal(err)
	}
	return dir, res.Map, lab.Strings
}

// framing applies the page's documented framing: map point (x, y) is drawn
// at CSS pixel (W/2 + (x − cx)·s, H/2 − (y − cy)·s) of the map area, with
// the bounding box of the rows (as float32) fitted in with 24-pixel margins.
func framing(y []float64, w, h float64) func(i int) (float64, float64) {
	minX, minY, maxX, maxY := math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)
	for i := range len(y) / 2 {
		px, py := float64(float32(y[2*i])), float64(float32(y[2*i+1]))
		minX, maxX, minY, maxY = math.Min(minX, px), math.Max(maxX, px), math.Min(minY, py), math.Max(maxY, py)
	}
	s := math.Min((w-48)/(maxX-minX), (h-48)/(maxY-minY))
	cx, cy := (minX+maxX)/2, (minY+maxY)/2
	return func(i int) (float64, float64) {
		return w/2 + (float64(float32(y[2*i]))-cx)*s, h/2 - (float64(float32(y[2*i+1]))-cy)*s
	}
}

// loneRow returns the row of the group labelled want whose nearest other
// row (on screen) is farthest away: hovering it cannot hit another row.
func loneRow(at func(int) (float64, float64), labels []string, want string) int {
	best, bestD := -1, -1.0
	for i, l := range labels {
		if l != want {
			continue
		}
		ui, vi := at(i)
		d := math.Inf(1)
		for j := range labels {
			if j != i {
				uj, vj := at(j)
				d = math.Min(d, math.Hypot(ui-uj, vi-vj))
			}
		}
		if d > bestD {
			best, bestD = i, d
		}
	}
	return best
}

// pageWatch records what must not happen in a page: console errors,
// uncaught exceptions, dialogs.
type pageWatch struct {
	mu   sync.Mutex
	bad  []string
	stop context.CancelFunc
}

func (w *pageWatch) add(s string) { w.mu.Lock(); w.bad = append(w.bad, s); w.mu.Unlock() }

func (w *pageWatch) problems() []string {
	w.mu.Lock()
	defer w.mu.Unlock()
	return append([]string(nil), w.bad...)
}

func watchPage(ctx context.Context) *pageWatch {
	w := &pageWatch{}
	console := chromedp.Events(ctx, runtime.ConsoleAPICalled)
	thrown := chromedp.Events(ctx, runtime.ExceptionThrown)
	dialogs := chromedp.Events(ctx, page.JavascriptDialogOpening)
	go func() {
		for ev, err := range console {
			if err != nil {
				return
			}
			if ev.Type == runtime.ConsoleAPICalledTypeError {
				var parts []string
				for _, a := range ev.Args {
					parts = append(parts, string(a.Value)+a.Description)
				}
				w.add("console error: " + strings.Join(parts, " "))
			}
		}
	}()
	go func() {
		for ev, err := range thrown {
			if err != nil {
				return
			}
			w.add("exception: " + ev.ExceptionDetails.Text)
		}
	}()
	go func() {
		for ev, err := range dialogs {
			if err != nil {
				return
			}
			w.add("dialog opened: " + ev.Message)
			_, _ = chromedp.Call(ctx, page.HandleJavaScriptDialog, page.HandleJavaScriptDialogParams{Accept: true})
		}
	}()
	return w
}

// stageBox is the map area's content box in CSS pixels: left, top, W, H.
const stageBox = `(() => { const s = document.getElementById('nj-stage'), r = s.getBoundingClientRect();
	return [r.left + s.clientLeft, r.top + s.clientTop, s.clientWidth, s.clientHeight]; })()`

func TestMapPageInBrowser(t *testing.T) {
	if testing.Short() {
		t.Skip("browser test skipped in -short mode")
	}
	bin := browserPath(t)
	dir, y, labels := browserRun(t)
	opts := append(chromedp.DefaultExecAllocatorOptions[:], chromedp.ExecPath(bin), chromedp.NoSandbox,
		chromedp.WindowSize(1100, 760), chromedp.Flag("use-gl", "angle"), chromedp.Flag("use-angle", "swiftshader"),
		chromedp.Flag("enable-unsafe-swiftshader", true))
	actx, cancel := chromedp.NewExecAllocator(context.Background(), opts...)
	defer cancel()
	for _, mode := range []string{"webgl", "canvas"} {
		t.Run(mode, func(t *testing.T) {
			ctx, cancel := chromedp.NewContext(actx)
			defer cancel()
			ctx, cancelT := context.WithTimeout(ctx, 40*time.Second)
			defer cancelT()
			if err := chromedp.Do(ctx); err != nil { // start the browser
				if os.Getenv("CI") != "true" {
					t.Skipf("Chromium at %s does not start: %v", bin, err)
				}
				t.Fatalf("Chromium at %s does not start: %v", bin, err)
			}
			watch := watchPage(ctx)
			url := "file://" + filepath.ToSlash(filepath.Join(dir, FileMapPage))
			if mode == "canvas" {
				url += "?renderer=canvas"
			}
			checkPage(t, ctx, url, mode, y, labels)
			if bad := watch.problems(); len(bad) > 0 {
				t.Errorf("the page had %d problems: %s", len(bad), strings.Join(bad, "; "))
			}
		})
	}
}

// checkPage runs the checks on one page: renderer, hover, legend, find.
func checkPage(t *testing.T, ctx context.Context, url, mode string, y []float64, labels []string) {
	if err := chromedp.Do(ctx, chromedp.Navigate(url), chromedp.WaitVisible(chromedp.CSS("body[data-ready]"))); err != nil {
		t.Fatalf("loading %s: %v", url, err)
	}
	renderer, err := chromedp.Run(ctx, chromedp.Evaluate[string](`nightjar.renderer`))
	if err != nil || renderer != mode {
		t.Fatalf("page draws with %q (%v), want %s", renderer, err, mode)
	}
	status, _ := chromedp.Run(ctx, chromedp.Text(chromedp.ID("nj-status")))
	if !strings.Contains(status, map[string]string{"webgl": "WebGL", "canvas": "canvas 2D"}[mode]) {
		t.Errorf("status line %q does not name the renderer", status)
	}
	box, err := chromedp.Run(ctx, chromedp.Evaluate[[]float64](stageBox))
	if err != nil {
		t.Fatal(err)
	}
	at := framing(y, box[2], box[3])
	lone := loneRow(at, labels, xssLabel)

	// Hover the pixel where the row is drawn: the tip names it, as text.
	u, v := at(lone)
	if err := chromedp.Do(ctx, chromedp.MouseEvent(chromedp.MouseMoved, box[0]+u, box[1]+v)); err != nil {
		t.Fatal(err)
	}
	tip, _ := chromedp.Run(ctx, chromedp.Evaluate[string](`document.getElementById('nj-tip').hidden ? '' : document.getElementById('nj-tip').textContent`))
	wantID := fmt.Sprintf(xssID, lone)
	if !strings.Contains(tip, wantID) || !strings.Contains(tip, xssLabel) {
		t.Errorf("hovering row %d at (%.1f, %.1f) shows %q, want its id %q and label", lone, u, v, tip, wantID)
	}
	if imgs, _ := chromedp.Run(ctx, chromedp.Evaluate[int](`document.querySelectorAll('img').length`)); imgs != 0 {
		t.Errorf("the page holds %d img elements: a label became markup", imgs)
	}

	// Opacity 1 (through the page's own control) draws points in their
	// exact colour; clicking the group's legend entry hides it, clicking
	// again brings it back.
	if err := chromedp.Do(ctx, chromedp.Evaluate[chromedp.Void](`(() => { const a = document.getElementById('nj-alpha'); a.value = 1; a.dispatchEvent(new Event('input')); })()`)); err != nil {
		t.Fatal(err)
	}
	// The mouse leaves the map, so the tip no longer covers it.
	if err := chromedp.Do(ctx, chromedp.MouseEvent(chromedp.MouseMoved, box[0]+box[2]+40, box[1]+box[3]-10)); err != nil {
		t.Fatal(err)
	}
	colour, group := groupColour(t, ctx, xssLabel)
	entry := chromedp.CSS(fmt.Sprintf(`button.nj-entry[data-group="%d"]`, group))
	before := colourPixels(t, ctx, box, colour)
	if before < 50 {
		t.Fatalf("group colour %v on only %d pixels of the map before hiding", colour, before)
	}
	if err := chromedp.Do(ctx, chromedp.Click(entry)); err != nil {
		t.Fatal(err)
	}
	if hidden := colourPixels(t, ctx, box, colour); float64(hidden) >= 0.01*float64(before) {
		t.Errorf("after hiding the group its colour is on %d pixels, was %d: want under 1 %%", hidden, before)
	}
	if err := chromedp.Do(ctx, chromedp.Click(entry)); err != nil {
		t.Fatal(err)
	}
	if again := colourPixels(t, ctx, box, colour); again != before {
		t.Errorf("after showing the group again its colour is on %d pixels, was %d", again, before)
	}

	// The find box centres the row it finds.
	other := (lone + 7) % len(labels)
	if err := chromedp.Do(ctx, chromedp.SendKeys(chromedp.ID("nj-find-input"), fmt.Sprintf(xssID, other)+"\r")); err != nil {
		t.Fatal(err)
	}
	found, _ := chromedp.Run(ctx, chromedp.Evaluate[int](`nightjar.found`))
	centre, _ := chromedp.Run(ctx, chromedp.Evaluate[[]float64](`nightjar.toScreen(nightjar.found)`))
	if found != other || len(centre) != 2 || math.Abs(centre[0]-box[2]/2) > 0.5 || math.Abs(centre[1]-box[3]/2) > 0.5 {
		t.Errorf("find %q gave row %d at %v, want row %d at the centre (%.1f, %.1f)", fmt.Sprintf(xssID, other), found, centre, other, box[2]/2, box[3]/2)
	}
	if err := chromedp.Do(ctx, chromedp.MouseEvent(chromedp.MouseMoved, box[0]+box[2]/2, box[1]+box[3]/2)); err != nil {
		t.Fatal(err)
	}
	tip, _ = chromedp.Run(ctx, chromedp.Evaluate[string](`document.getElementById('nj-tip').textContent`))
	if !strings.Contains(tip, fmt.Sprintf(xssID, other)) {
		t.Errorf("hovering the centre after find shows %q", tip)
	}
}

// groupColour returns the colour and legend index of the group labelled label.
func groupColour(t *testing.T, ctx context.Context, label string) (color.RGBA, int) {
	t.Helper()
	js := fmt.Sprintf(`(() => { const m = JSON.parse(document.getElementById('nj-meta').textContent);
		const k = m.groups.findIndex((g) => g.label === %q); return [k + 1, m.groups[k].colour]; })()`, label)
	got, err := chromedp.Run(ctx, chromedp.Evaluate[[]any](js))
	if err != nil || len(got) != 2 {
		t.Fatalf("group of %q: %v %v", label, got, err)
	}
	var c color.RGBA
	fmt.Sscanf(got[1].(string), "#%02x%02x%02x", &c.R, &c.G, &c.B)
	c.A = 255
	return c, int(got[0].(float64))
}

// colourPixels counts the pixels of the map area drawn exactly in c, on a
// screenshot taken after the next frames.
func colourPixels(t *testing.T, ctx context.Context, box []float64, c color.RGBA) int {
	t.Helper()
	if err := chromedp.Do(ctx, chromedp.Evaluate[chromedp.Void](`new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r)))`, chromedp.EvalAwaitPromise)); err != nil {
		t.Fatal(err)
	}
	shot, err := chromedp.Run(ctx, chromedp.CaptureScreenshot())
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(shot))
	if err != nil {
		t.Fatal(err)
	}
	r := image.Rect(int(box[0])+1, int(box[1])+1, int(box[0]+box[2])-1, int(box[1]+box[3])-1).Intersect(img.Bounds())
	n := 0
	for yy := r.Min.Y; yy < r.Max.Y; yy++ {
		for xx := r.Min.X; xx < r.Max.X; xx++ {
			if color.RGBAModel.Convert(img.At(xx, yy)).(color.RGBA) == c {
				n++
			}
		}
	}
	return n
}
