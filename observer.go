package nightjar

// Observer receives a run's progress: the start of each phase, its
// progress, lines of information and warnings. The command line draws them
// as bars and log lines; a library user may log them, show them, or pass nil
// to ignore them. Calls come from the goroutine running the phase, and
// Progress may also come from the phase's workers: an Observer must be safe
// for concurrent use.
type Observer interface {
	// Phase announces a phase of total steps (−1 when unknown); it ends
	// the previous phase.
	Phase(name string, total int64)
	// Progress reports done of total steps of the current phase.
	Progress(done, total int64)
	// Detail replaces the current phase's description, e.g. to show the
	// optimiser's KL divergence.
	Detail(text string)
	// Done ends the current phase.
	Done()
	// Note is a line of information.
	Note(text string)
	// Warn is a line that the user should read.
	Warn(text string)
}

// wantDetail tells whether obs wants Detail calls whose text costs work to
// compute (the optimiser's KL, a pass over P): an Observer may have a method
// DetailWanted() bool that returns false to be spared them.
func wantDetail(obs Observer) bool {
	if _, quiet := obs.(quietObserver); quiet {
		return false
	}
	if w, ok := obs.(interface{ DetailWanted() bool }); ok {
		return w.DetailWanted()
	}
	return true
}

// quietObserver ignores everything.
type quietObserver struct{}

func (quietObserver) Phase(string, int64)   {}
func (quietObserver) Progress(int64, int64) {}
func (quietObserver) Detail(string)         {}
func (quietObserver) Done()                 {}
func (quietObserver) Note(string)           {}
func (quietObserver) Warn(string)           {}

func observerOrQuiet(o Observer) Observer {
	if o == nil {
		return quietObserver{}
	}
	return o
}

// phaseBar opens a phase and returns its progress callback.
func phaseBar(o Observer, name string, total int64) func(done, total int64) {
	o.Phase(name, total)
	return o.Progress
}
