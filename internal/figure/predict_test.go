package figure

import (
	"bytes"
	"image/png"
	"math"
	"testing"
)

func TestDrawPrediction(t *testing.T) {
	nan := math.NaN()
	pts := []PredictionPoint{
		{Name: "theta=0.5", Seconds: 900, Low: 700, High: 1100, Quality: 0.998, QualityLo: 0.996, QualityHi: 0.998},
		{Name: "theta=1", Seconds: 600, Low: 500, High: 800, Quality: 0.997, QualityLo: nan, QualityHi: nan},
		{Name: "refused", Seconds: nan, Low: nan, High: nan, Quality: 0.99},
	}
	var b bytes.Buffer
	if err := DrawPrediction(&b, "demo, 1,000,000 rows", "trustworthiness@10", pts); err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(&b)
	if err != nil {
		t.Fatalf("not a PNG: %v", err)
	}
	if r := img.Bounds(); r.Dx() < 400 || r.Dy() < 200 {
		t.Errorf("chart is %v", r)
	}
	// The first setting's colour is on the chart.
	want := Palette()[0]
	found := false
	for y := img.Bounds().Min.Y; y < img.Bounds().Max.Y && !found; y++ {
		for x := img.Bounds().Min.X; x < img.Bounds().Max.X; x++ {
			r, g, bl, _ := img.At(x, y).RGBA()
			if uint8(r>>8) == want.R && uint8(g>>8) == want.G && uint8(bl>>8) == want.B {
				found = true
				break
			}
		}
	}
	if !found {
		t.Error("the first palette colour is not on the chart")
	}
	if err := DrawPrediction(&b, "x", "q", pts[2:]); err == nil {
		t.Error("a chart with no predicted point should be refused")
	}
}
