package nightjar

import (
	"fmt"
	"io"
	"time"

	"nightjar/checkpoint"
	"nightjar/ingest"
)

// finish writes the outputs, each atomically, then marks the run finished.
func (j *job) finish(y []float64) error {
	t := j.table
	t0 := time.Now()
	j.setStatus(checkpoint.StatusRunning, checkpoint.PhaseOutputs)
	if err := checkpoint.AtomicWrite(j.run.Path(FileEmbedding), func(w io.Writer) error {
		return ingest.WriteEmbedding(w, t.ID, t.Label, y, j.s.Dims)
	}); err != nil {
		return fmt.Errorf("writing %s: %w", FileEmbedding, err)
	}
	labels := labelStrings(t.Label)
	if err := j.writeMaps(y, labels); err != nil {
		return err
	}
	j.rep.Phases["outputs"] = time.Since(t0).Seconds()
	j.rep.PhaseMemory["outputs"] = peakMemory()
	if j.ctx.Err() != nil {
		// Stopped before the scores: the outputs are redone on resume,
		// from the last checkpoint (the optimiser repeats its last
		// iterations to the same bits).
		return j.stopped(j.rep.Optimiser.Iterations, false)
	}
	if j.rt.ScoreSample > 0 {
		t1 := time.Now()
		j.obs.Note(fmt.Sprintf("scoring the map on %d sampled rows", min(j.rt.ScoreSample, t.N)))
		// The scores take minutes at 10⁷ rows, longer than a batch
		// system waits after its stop signal: a stop abandons them, and
		// they are redone on resume, like the outputs.
		x, err := j.features()
		if err != nil {
			j.warn("no scores: " + err.Error())
		} else {
			var q Quality
			var note, warning string
			if err := j.await(func() error {
				q, note, warning = j.scoreRun(x, y, labels)
				return nil
			}); err != nil {
				return err
			}
			if warning != "" {
				j.warn(warning)
			}
			if note != "" {
				j.obs.Note(note)
			}
			q.KL, q.KLMethod = finalKL(j.P, y, j.s, j.rep.Optimiser.KL)
			j.rep.Quality = &q
			j.rep.Phases["scores"] = time.Since(t1).Seconds()
			j.rep.PhaseMemory["scores"] = peakMemory()
		}
	}
	j.rep.SecondsTotal = time.Since(j.start).Seconds()
	j.rep.PeakMemoryBytes = peakMemory()
	if err := writeReport(j.run.Path(FileReport), &j.rep); err != nil {
		return err
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	m := j.run.Manifest()
	m.Phase, m.Status, m.Iteration, m.KL, m.Updated = checkpoint.PhaseFinished, checkpoint.StatusFinished, j.rep.Optimiser.Iterations, j.rep.Optimiser.KL, time.Now()
	m.Elapsed = j.elapsed0 + time.Since(j.start).Seconds()
	return j.run.SaveManifest(m)
}

// writeTable writes t to path as Parquet, atomically.
func writeTable(path string, t *ingest.Table) error {
	if err := checkpoint.AtomicWrite(path, func(w io.Writer) error { return ingest.WriteTable(w, t) }); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

// labelStrings returns the label column as text, or nil without labels.
func labelStrings(c *Column) []string {
	if c == nil {
		return nil
	}
	out := make([]string, c.Len())
	for i := range out {
		out[i] = c.String(i)
	}
	return out
}
