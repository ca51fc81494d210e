package figure

import (
	"bytes"
	"image/png"
	"math"
	"testing"
)

func TestDrawTradeoff(t *testing.T) {
	var b bytes.Buffer
	pts := []TradeoffPoint{{"theta=0.25", 40, 0.99}, {"theta=0.5", 20, 0.985}, {"theta=1", 9, 0.97}, {"failed", 3, math.NaN()}}
	if err := DrawTradeoff(&b, "demo", "trustworthiness@10", pts); err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(&b)
	if err != nil {
		t.Fatalf("not a PNG: %v", err)
	}
	if r := img.Bounds(); r.Dx() < 400 || r.Dy() < 200 {
		t.Errorf("chart is %v", r)
	}
	if err := DrawTradeoff(&b, "demo", "q", []TradeoffPoint{{"x", 1, math.NaN()}}); err == nil {
		t.Error("a chart with no scored point should be refused")
	}
}
