package bench

import (
	"slices"
	"testing"
)

// TestMNISTTestMatchesMNIST: the test digits read alone are rows 60,001… of
// MNIST (the official split: 60,000 training then 10,000 test images; LeCun,
// Cortes & Burges).
func TestMNISTTestMatchesMNIST(t *testing.T) {
	dir, err := MNISTDir()
	if err != nil {
		t.Skip(err)
	}
	test, err := MNISTTest(dir, 50)
	if err != nil {
		t.Fatal(err)
	}
	all, err := MNIST(dir, 60050)
	if err != nil {
		t.Fatal(err)
	}
	d := test.D
	if test.N != 50 || d != 784 || !slices.Equal(test.Data, all.Data[60000*d:60050*d]) ||
		!slices.Equal(test.Label.Strings, all.Label.Strings[60000:]) || !slices.Equal(test.ID.Ints, all.ID.Ints[60000:]) {
		t.Fatal("the first 50 test digits differ from rows 60,001–60,050 of MNIST")
	}
	if _, err := MNISTTest(dir, 10001); err == nil {
		t.Error("10,001 test digits were returned")
	}
}
