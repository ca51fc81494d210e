package bench

import (
	"fmt"
	"io"
	"math"
	"math/rand/v2"

	"nightjar/ingest"
	"nightjar/internal/par"
)

// The documents scenario: an invented library of short texts, each embedded
// as a vector, the way text-embedding pipelines store them (one
// fixed_size_list<float32> column per row). Nothing here models a real
// embedding model; it only has the traits that matter to a map of one: rows
// cluster around topics, topics group into themes, a document may lean towards
// a second topic, the vectors' lengths vary (so the cosine distance, which
// ignores them, is the fitting metric), and the topics are unequal in size.
const (
	// DocumentWidth is the width of the documents' vectors.
	DocumentWidth = 768
	// DocumentThemes and DocumentTopics count the themes and the topics (the
	// label of a row is its main topic).
	DocumentThemes = 8
	DocumentTopics = 40
	docChunk       = 65536 // rows per record batch written
	docBlock       = 1024  // rows per generation block (fixed: rows do not depend on threads)
	docStream      = 0x646f6373
)

// docModel holds the topic directions of a seed.
type docModel struct {
	width   int
	centres []float32 // DocumentTopics×width, unit rows
	cum     []float64 // cumulative topic shares
}

// newDocModel draws the themes and topics: a topic's direction is 0.6 of its
// theme's (random unit vector) and 0.8 of its own, so that topics of one
// theme are nearer each other (cosine 0.36) than to other topics (about 0).
// Topic shares follow 1/(rank+2), shuffled.
func newDocModel(width int, seed uint64) *docModel {
	rng := rand.New(rand.NewPCG(seed, docStream))
	unitVec := func() []float64 {
		v := make([]float64, width)
		s := 0.0
		for j := range v {
			v[j] = rng.NormFloat64()
			s += v[j] * v[j]
		}
		for j := range v {
			v[j] /= math.Sqrt(s)
		}
		return v
	}
	themes := make([][]float64, DocumentThemes)
	for t := range themes {
		themes[t] = unitVec()
	}
	m := &docModel{width: width, centres: make([]float32, DocumentTopics*width)}
	for t := range DocumentTopics {
		own := unitVec()
		theme := themes[t%DocumentThemes]
		s := 0.0
		v := make([]float64, width)
		for j := range v {
			v[j] = 0.6*theme[j] + 0.8*own[j]
			s += v[j] * v[j]
		}
		for j := range v {
			m.centres[t*width+j] = float32(v[j] / math.Sqrt(s))
		}
	}
	shares := make([]float64, DocumentTopics)
	for t := range shares {
		shares[t] = 1 / float64(t+2)
	}
	rng.Shuffle(len(shares), func(a, b int) { shares[a], shares[b] = shares[b], shares[a] })
	total := 0.0
	for _, s := range shares {
		total += s
	}
	acc := 0.0
	for _, s := range shares {
		acc += s / total
		m.cum = append(m.cum, acc)
	}
	return m
}

// DocumentTopicName is the label of topic t.
func DocumentTopicName(t int) string {
	return fmt.Sprintf("theme %d · topic %02d", t%DocumentThemes+1, t+1)
}

// row fills out (width values) with document i and returns its main topic.
// Each row has its own random stream, so rows can be made in any order.
func (m *docModel) row(i int64, seed uint64, out []float32) int {
	rng := rand.New(rand.NewPCG(seed^docStream, uint64(i)))
	u := rng.Float64()
	topic := 0
	for topic < len(m.cum)-1 && u > m.cum[topic] {
		topic++
	}
	second := rng.IntN(DocumentTopics)
	lean := 0.5 * rng.Float64()
	if second == topic {
		lean = 0
	}
	length := math.Exp(0.5 * rng.NormFloat64())
	noise := 1.3 / math.Sqrt(float64(m.width))
	a := m.centres[topic*m.width : (topic+1)*m.width]
	b := m.centres[second*m.width : (second+1)*m.width]
	for j := range out {
		v := (1-lean)*float64(a[j]) + lean*float64(b[j]) + noise*rng.NormFloat64()
		out[j] = float32(length * v)
	}
	return topic
}

// WriteDocuments writes rows documents of the scenario (DocumentWidth wide)
// to w as an Arrow IPC file: "doc_id" (int64, 0…rows−1), "topic" (text: the
// main topic's name) and "embedding" (fixed_size_list<float32>[768]), in
// record batches of 65,536 rows generated on up to threads goroutines. The
// bytes depend on rows and seed only. w is not closed.
func WriteDocuments(w io.Writer, rows int, seed uint64, threads int) error {
	if rows < 1 {
		return fmt.Errorf("documents: %d rows", rows)
	}
	m := newDocModel(DocumentWidth, seed)
	vw, err := ingest.NewVectorWriter(w, "doc_id", "topic", "embedding", DocumentWidth)
	if err != nil {
		return err
	}
	vals := make([]float32, min(rows, docChunk)*DocumentWidth)
	ids := make([]int64, min(rows, docChunk))
	labels := make([]string, min(rows, docChunk))
	names := make([]string, DocumentTopics)
	for t := range names {
		names[t] = DocumentTopicName(t)
	}
	for lo := 0; lo < rows; lo += docChunk {
		n := min(docChunk, rows-lo)
		par.Blocks(n, docBlock, threads, func(_, _, a, b int) {
			for r := a; r < b; r++ {
				i := int64(lo + r)
				ids[r] = i
				labels[r] = names[m.row(i, seed, vals[r*DocumentWidth:(r+1)*DocumentWidth])]
			}
		})
		if err := vw.Write(ids[:n], labels[:n], vals[:n*DocumentWidth]); err != nil {
			return err
		}
	}
	return vw.Close()
}
