package figure

import (
	"image/color"
	"math"
)

// oklab is a colour in the OKLab space (Ottosson 2020): L is the perceived
// lightness in [0, 1], a and b the green–red and blue–yellow axes.
type oklab struct{ L, A, B float64 }

// oklch returns the OKLab colour of lightness l, chroma c and hue h (degrees).
func oklch(l, c, h float64) oklab {
	r := h * math.Pi / 180
	return oklab{l, c * math.Cos(r), c * math.Sin(r)}
}

// decode returns the linear-light value of an sRGB component v in [0, 1]
// (IEC 61966-2-1).
func decode(v float64) float64 {
	if v <= 0.04045 {
		return v / 12.92
	}
	return math.Pow((v+0.055)/1.055, 2.4)
}

// encode is the inverse of decode.
func encode(v float64) float64 {
	if v <= 0.0031308 {
		return 12.92 * v
	}
	return 1.055*math.Pow(v, 1/2.4) - 0.055
}

// linear returns the linear-light red, green and blue of c.
func linear(c color.RGBA) [3]float64 {
	return [3]float64{decode(float64(c.R) / 255), decode(float64(c.G) / 255), decode(float64(c.B) / 255)}
}

// fromLinear returns the 8-bit sRGB colour of linear-light rgb, each
// component clamped to [0, 1].
func fromLinear(rgb [3]float64) color.RGBA {
	var out [3]uint8
	for i, v := range rgb {
		out[i] = uint8(math.Round(255 * encode(math.Min(1, math.Max(0, v)))))
	}
	return color.RGBA{out[0], out[1], out[2], 0xff}
}

// toOKLab converts linear-light sRGB to OKLab with the two matrices of
// Ottosson (2020).
func toOKLab(rgb [3]float64) oklab {
	r, g, b := rgb[0], rgb[1], rgb[2]
	l := math.Cbrt(0.4122214708*r + 0.5363325363*g + 0.0514459929*b)
	m := math.Cbrt(0.2119034982*r + 0.6806995451*g + 0.1073969566*b)
	s := math.Cbrt(0.0883024619*r + 0.2817188376*g + 0.6299787005*b)
	return oklab{
		0.2104542553*l + 0.7936177850*m - 0.0040720468*s,
		1.9779984951*l - 2.4285922050*m + 0.4505937099*s,
		0.0259040371*l + 0.7827717662*m - 0.8086757660*s,
	}
}

// toLinear converts OKLab to linear-light sRGB (Ottosson 2020); components
// outside [0, 1] mean the colour is outside the sRGB gamut.
func (c oklab) toLinear() [3]float64 {
	l := c.L + 0.3963377774*c.A + 0.2158037573*c.B
	m := c.L - 0.1055613458*c.A - 0.0638541728*c.B
	s := c.L - 0.0894841775*c.A - 1.2914855480*c.B
	l, m, s = l*l*l, m*m*m, s*s*s
	return [3]float64{
		4.0767416621*l - 3.3077115913*m + 0.2309699292*s,
		-1.2684380046*l + 2.6097574011*m - 0.3413193965*s,
		-0.0041960863*l - 0.7034186147*m + 1.7076147010*s,
	}
}

// inGamut tells whether c is an sRGB colour.
func (c oklab) inGamut() bool {
	for _, v := range c.toLinear() {
		if v < -1e-9 || v > 1+1e-9 {
			return false
		}
	}
	return true
}

// maxChroma returns the largest chroma that keeps OKLCH (l, ·, h) inside the
// sRGB gamut, found by bisection to about 1e-6.
func maxChroma(l, h float64) float64 {
	lo, hi := 0.0, 0.5
	for range 20 {
		mid := (lo + hi) / 2
		if oklch(l, mid, h).inGamut() {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo
}

// rgba returns c as 8-bit sRGB, clamped to the gamut.
func (c oklab) rgba() color.RGBA { return fromLinear(c.toLinear()) }

// hex returns c as "#rrggbb".
func hex(c color.RGBA) string {
	const digits = "0123456789abcdef"
	b := []byte{'#', 0, 0, 0, 0, 0, 0}
	for i, v := range []uint8{c.R, c.G, c.B} {
		b[1+2*i], b[2+2*i] = digits[v>>4], digits[v&15]
	}
	return string(b)
}

// Hex returns c as the CSS colour "#rrggbb".
func Hex(c color.RGBA) string { return hex(c) }
