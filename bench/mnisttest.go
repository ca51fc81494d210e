package bench

import (
	"fmt"
	"strconv"

	"nightjar/ingest"
)

// MNISTTest loads the first n (all when n ≤ 0) of the 10,000 MNIST test
// digits (LeCun, Cortes & Burges: the files t10k-images-idx3-ubyte and
// t10k-labels-idx1-ubyte in dir, gzipped or not) as MNIST does for the
// training digits: 784 features "px000".."px783" holding grey / 255, the
// label column "digit", and ids 60001… continuing those of MNIST, so that a
// test digit has the same id in both tables. It returns an error if a file
// is missing or malformed or n exceeds the 10,000 test digits.
func MNISTTest(dir string, n int) (*ingest.Table, error) {
	idims, img, lab, err := readMNISTPart(dir, mnistTestImages, mnistTestLabels)
	if err != nil {
		return nil, err
	}
	rows, d := idims[0], idims[1]*idims[2]
	if n > rows {
		return nil, fmt.Errorf("reading MNIST test digits in %s: asked for %d rows, the files hold %d", dir, n, rows)
	}
	if n > 0 {
		rows = n
	}
	pixels := make([]float32, rows*d)
	for i, v := range img[:rows*d] {
		pixels[i] = float32(v) / 255
	}
	labels := make([]string, rows)
	for i, l := range lab[:rows] {
		labels[i] = strconv.Itoa(int(l))
	}
	return mnistTable(pixels, labels, d, 60001), nil
}
