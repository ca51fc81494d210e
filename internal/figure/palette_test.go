package figure

import (
	"image/color"
	"math"
	"testing"
)

// cielab is a colour in CIE 1976 L*a*b*.
type cielab struct{ L, A, B float64 }

// toCIELab converts an 8-bit sRGB colour to CIELAB under the D65 white:
// linear sRGB to XYZ with the matrix of IEC 61966-2-1, then the CIE 1976
// formulas (from memory; both are textbook material).
func toCIELab(c color.RGBA) cielab {
	return linearToCIELab(linear(c))
}

func linearToCIELab(rgb [3]float64) cielab {
	r, g, b := rgb[0], rgb[1], rgb[2]
	x := 0.4124*r + 0.3576*g + 0.1805*b
	y := 0.2126*r + 0.7152*g + 0.0722*b
	z := 0.0193*r + 0.1192*g + 0.9505*b
	f := func(t float64) float64 {
		if t > 216.0/24389 {
			return math.Cbrt(t)
		}
		return (24389.0/27*t + 16) / 116
	}
	fx, fy, fz := f(x/0.95047), f(y), f(z/1.08883)
	return cielab{116*fy - 16, 500 * (fx - fy), 200 * (fy - fz)}
}

// deltaE2000 is the CIEDE2000 colour difference with kL = kC = kH = 1, as
// set out step by step in Sharma, Wu & Dalal, "The CIEDE2000 color-difference
// formula: implementation notes, supplementary test data, and mathematical
// observations", Color Res. Appl. 30(1), 21–30, 2005 (equations 2–22).
func deltaE2000(p, q cielab) float64 {
	const deg = math.Pi / 180
	pow7 := func(x float64) float64 { return math.Pow(x, 7) }
	cBar := (math.Hypot(p.A, p.B) + math.Hypot(q.A, q.B)) / 2
	g := 0.5 * (1 - math.Sqrt(pow7(cBar)/(pow7(cBar)+pow7(25))))
	a1, a2 := (1+g)*p.A, (1+g)*q.A
	c1, c2 := math.Hypot(a1, p.B), math.Hypot(a2, q.B)
	hue := func(b, a float64) float64 {
		if a == 0 && b == 0 {
			return 0
		}
		h := math.Atan2(b, a) / deg
		if h < 0 {
			h += 360
		}
		return h
	}
	h1, h2 := hue(p.B, a1), hue(q.B, a2)
	dL, dC := q.L-p.L, c2-c1
	dh := 0.0
	if c1*c2 != 0 {
		dh = h2 - h1
		if dh > 180 {
			dh -= 360
		} else if dh < -180 {
			dh += 360
		}
	}
	dH := 2 * math.Sqrt(c1*c2) * math.Sin(dh/2*deg)
	lBar, cBarP := (p.L+q.L)/2, (c1+c2)/2
	hBar := h1 + h2
	if c1*c2 != 0 {
		switch {
		// Pair 14 of the published data has hues exactly 180° apart, which
		// the formula puts on this branch; in floating point their difference
		// can come out a hair above 180°, hence the 1e-9° allowance.
		case math.Abs(h1-h2) <= 180+1e-9:
			hBar = (h1 + h2) / 2
		case h1+h2 < 360:
			hBar = (h1 + h2 + 360) / 2
		default:
			hBar = (h1 + h2 - 360) / 2
		}
	}
	t := 1 - 0.17*math.Cos((hBar-30)*deg) + 0.24*math.Cos(2*hBar*deg) + 0.32*math.Cos((3*hBar+6)*deg) - 0.20*math.Cos((4*hBar-63)*deg)
	dTheta := 30 * math.Exp(-math.Pow((hBar-275)/25, 2))
	rc := 2 * math.Sqrt(pow7(cBarP)/(pow7(cBarP)+pow7(25)))
	l50 := (lBar - 50) * (lBar - 50)
	sl := 1 + 0.015*l50/math.Sqrt(20+l50)
	sc := 1 + 0.045*cBarP
	sh := 1 + 0.015*cBarP*t
	rt := -math.Sin(2*dTheta*deg) * rc
	return math.Sqrt((dL/sl)*(dL/sl) + (dC/sc)*(dC/sc) + (dH/sh)*(dH/sh) + rt*(dC/sc)*(dH/sh))
}

// The 34 test pairs of Sharma, Wu & Dalal (2005), Table 1, as shipped in the
// test file tests.py of the public repository github.com/sumtype/CIEDE2000
// (commit 35e270e38917141327a893fd9ad63118aa3ca726), which takes them from the
// authors' ciede2000testdata.txt: L*a*b* of both colours and ΔE00 to four
// decimals.
var sharmaPairs = [34][7]float64{
	{50.0000, 2.6772, -79.7751, 50.0000, 0.0000, -82.7485, 2.0425},
	{50.0000, 3.1571, -77.2803, 50.0000, 0.0000, -82.7485, 2.8615},
	{50.0000, 2.8361, -74.0200, 50.0000, 0.0000, -82.7485, 3.4412},
	{50.0000, -1.3802, -84.2814, 50.0000, 0.0000, -82.7485, 1.0000},
	{50.0000, -1.1848, -84.8006, 50.0000, 0.0000, -82.7485, 1.0000},
	{50.0000, -0.9009, -85.5211, 50.0000, 0.0000, -82.7485, 1.0000},
	{50.0000, 0.0000, 0.0000, 50.0000, -1.0000, 2.0000, 2.3669},
	{50.0000, -1.0000, 2.0000, 50.0000, 0.0000, 0.0000, 2.3669},
	{50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0009, 7.1792},
	{50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0010, 7.1792},
	{50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0011, 7.2195},
	{50.0000, 2.4900, -0.0010, 50.0000, -2.4900, 0.0012, 7.2195},
	{50.0000, -0.0010, 2.4900, 50.0000, 0.0009, -2.4900, 4.8045},
	{50.0000, -0.0010, 2.4900, 50.0000, 0.0010, -2.4900, 4.8045},
	{50.0000, -0.0010, 2.4900, 50.0000, 0.0011, -2.4900, 4.7461},
	{50.0000, 2.5000, 0.0000, 50.0000, 0.0000, -2.5000, 4.3065},
	{50.0000, 2.5000, 0.0000, 73.0000, 25.0000, -18.0000, 27.1492},
	{50.0000, 2.5000, 0.0000, 61.0000, -5.0000, 29.0000, 22.8977},
	{50.0000, 2.5000, 0.0000, 56.0000, -27.0000, -3.0000, 31.9030},
	{50.0000, 2.5000, 0.0000, 58.0000, 24.0000, 15.0000, 19.4535},
	{50.0000, 2.5000, 0.0000, 50.0000, 3.1736, 0.5854, 1.0000},
	{50.0000, 2.5000, 0.0000, 50.0000, 3.2972, 0.0000, 1.0000},
	{50.0000, 2.5000, 0.0000, 50.0000, 1.8634, 0.5757, 1.0000},
	{50.0000, 2.5000, 0.0000, 50.0000, 3.2592, 0.3350, 1.0000},
	{60.2574, -34.0099, 36.2677, 60.4626, -34.1751, 39.4387, 1.2644},
	{63.0109, -31.0961, -5.8663, 62.8187, -29.7946, -4.0864, 1.2630},
	{61.2901, 3.7196, -5.3901, 61.4292, 2.2480, -4.9620, 1.8731},
	{35.0831, -44.1164, 3.7933, 35.0232, -40.0716, 1.5901, 1.8645},
	{22.7233, 20.0904, -46.6940, 23.0331, 14.9730, -42.5619, 2.0373},
	{36.4612, 47.8580, 18.3852, 36.2715, 50.5065, 21.2231, 1.4146},
	{90.8027, -2.0831, 1.4410, 91.1528, -1.6435, 0.0447, 1.4441},
	{90.9257, -0.5406, -0.9208, 88.6381, -0.8985, -0.7239, 1.5381},
	{6.7747, -0.2908, -2.4247, 5.8714, -0.0985, -2.2286, 0.6377},
	{2.0776, 0.0795, -1.1350, 0.9033, -0.0636, -0.5514, 0.9082},
}

func TestDeltaE2000SharmaPairs(t *testing.T) {
	for i, p := range sharmaPairs {
		a, b := cielab{p[0], p[1], p[2]}, cielab{p[3], p[4], p[5]}
		for _, got := range []float64{deltaE2000(a, b), deltaE2000(b, a)} {
			if math.Abs(got-p[6]) > 5e-5 {
				t.Errorf("pair %d: ΔE00 = %.5f, published %.4f", i+1, got, p[6])
			}
		}
	}
}

// Simulation of dichromacy by the matrices of Machado, Oliveira & Fernandes,
// "A physiologically-based model for simulation of color vision deficiency",
// IEEE TVCG 15(6), 1291–1298, 2009, at severity 1.0, applied to linear RGB.
// The values are those of the authors' supplementary page as copied into
// colorspacious/cvd.py of the public repository github.com/njsmith/colorspacious
// (commit 949dba988d020b3941a77da7608bbc13a070e054), key 100 of
// "protanomaly" and "deuteranomaly".
var (
	protanopia = [3][3]float64{
		{0.152286, 1.052583, -0.204868},
		{0.114503, 0.786281, 0.099216},
		{-0.003882, -0.048116, 1.051998},
	}
	deuteranopia = [3][3]float64{
		{0.367322, 0.860646, -0.227968},
		{0.280085, 0.672501, 0.047413},
		{-0.011820, 0.042940, 0.968881},
	}
)

// simulate returns c as seen with the dichromacy of matrix m, in CIELAB.
func simulate(m [3][3]float64, c color.RGBA) cielab {
	l := linear(c)
	var out [3]float64
	for i := range 3 {
		out[i] = math.Min(1, math.Max(0, m[i][0]*l[0]+m[i][1]*l[1]+m[i][2]*l[2]))
	}
	return linearToCIELab(out)
}

// closest returns the smallest CIEDE2000 distance between two of cs as seen
// through view, and the pair.
func closest(cs []color.RGBA, view func(color.RGBA) cielab) (float64, int, int) {
	best, bi, bj := math.Inf(1), -1, -1
	for i := range cs {
		for j := i + 1; j < len(cs); j++ {
			if d := deltaE2000(view(cs[i]), view(cs[j])); d < best {
				best, bi, bj = d, i, j
			}
		}
	}
	return best, bi, bj
}

func TestPaletteDistances(t *testing.T) {
	p := Palette()
	tests := []struct {
		name   string
		n      int
		view   func(color.RGBA) cielab
		atLeat float64
	}{
		{"first 12, normal vision", 12, toCIELab, 15},
		{"first 12, deuteranopia", 12, func(c color.RGBA) cielab { return simulate(deuteranopia, c) }, 6},
		{"first 12, protanopia", 12, func(c color.RGBA) cielab { return simulate(protanopia, c) }, 6},
		{"all 24, normal vision", 24, toCIELab, 12},
	}
	for _, tc := range tests {
		d, i, j := closest(p[:tc.n], tc.view)
		t.Logf("%s: closest pair %d, %d at ΔE00 %.1f", tc.name, i, j, d)
		if d < tc.atLeat {
			t.Errorf("%s: colours %d (%s) and %d (%s) are ΔE00 %.1f apart, want ≥ %g", tc.name, i, hex(p[i]), j, hex(p[j]), d, tc.atLeat)
		}
	}
	// Every colour stands out from the white paper and from the greys of
	// missing values and reference rows.
	for i, c := range p {
		for _, bg := range []color.RGBA{Paper, Missing, Reference} {
			if d := deltaE2000(toCIELab(c), toCIELab(bg)); d < 10 {
				t.Errorf("colour %d (%s) is ΔE00 %.1f from %s", i, hex(c), d, hex(bg))
			}
		}
	}
}

// The palette's sRGB values are the rounding of its OKLCH design.
func TestPaletteFollowsDesign(t *testing.T) {
	for i, s := range design {
		got := s.designed()
		for k, d := range []int{int(got.R) - int(s.RGB.R), int(got.G) - int(s.RGB.G), int(got.B) - int(s.RGB.B)} {
			if d < -1 || d > 1 {
				t.Errorf("colour %d: channel %d of the design is %s, table has %s", i, k, hex(got), hex(s.RGB))
			}
		}
	}
	// The greys are neutral at the OKLab lightness their docs give.
	for _, g := range []struct {
		c color.RGBA
		l float64
	}{{Missing, 0.72}, {Reference, 0.87}} {
		ok := toOKLab(linear(g.c))
		if math.Abs(ok.L-g.l) > 0.005 || math.Hypot(ok.A, ok.B) > 1e-3 {
			t.Errorf("grey %s is OKLab %.3f %.4f %.4f, want L = %g and no chroma", hex(g.c), ok.L, ok.A, ok.B, g.l)
		}
	}
}

// OKLab round trip and Ottosson's (2020) white: L = 1, a = b = 0.
func TestOKLab(t *testing.T) {
	w := toOKLab([3]float64{1, 1, 1})
	if math.Abs(w.L-1) > 1e-4 || math.Abs(w.A) > 1e-4 || math.Abs(w.B) > 1e-4 {
		t.Errorf("white is OKLab %+v", w)
	}
	for _, c := range []color.RGBA{{0x12, 0x80, 0xf0, 0xff}, {0xff, 0, 0, 0xff}, {0, 0, 0, 0xff}, {0x7f, 0x7f, 0x7f, 0xff}} {
		if got := toOKLab(linear(c)).rgba(); got != c {
			t.Errorf("round trip of %s gives %s", hex(c), hex(got))
		}
	}
}

func TestLegendMoreLabelsThanColours(t *testing.T) {
	labels := make([]string, 0, 3*MaxGroups)
	for i := range MaxGroups + 10 {
		labels = append(labels, "l"+thousands(i))
	}
	labels = append(labels, "top", "top", "top")
	groups, codes := Legend(labels)
	if len(groups) != MaxGroups {
		t.Fatalf("%d groups, want at most %d", len(groups), MaxGroups)
	}
	if groups[0].Label != "top" || groups[0].Count != 3 {
		t.Errorf("first group %+v, want the most frequent label", groups[0])
	}
	last := groups[MaxGroups-1]
	if last.Label != OtherGroup(12) || last.Count != 12 {
		t.Errorf("last group %+v, want the 12 rarest labels together", last)
	}
	total := 0
	for _, g := range groups {
		total += g.Count
	}
	if total != len(labels) {
		t.Errorf("groups count %d points of %d", total, len(labels))
	}
	for i, c := range codes {
		if g := groups[c]; g.Label != labels[i] && g.Label != last.Label {
			t.Fatalf("point %d (%q) in group %q", i, labels[i], g.Label)
		}
	}
}
