package checkpoint

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sync"
	"syscall"
	"time"
)

// The writer lock of a run directory. One process at a time may write into
// a run directory: it holds an operating-system lock (flock) on LockName for
// its whole life, and keeps a lock record, HolderName, with its host, pid,
// start time and a heartbeat refreshed every HeartbeatEvery. Cluster file
// systems often honour flock only within one node, so the record decides
// across nodes: a holder on another host counts as alive until its heartbeat
// is older than StaleAfter; a holder on this host until its pid is gone.
const (
	LockName       = ".lock"
	HolderName     = "lock.json"
	HeartbeatEvery = 30 * time.Second
	StaleAfter     = 5 * time.Minute
)

// Holder is the lock record of the process writing into a run directory.
type Holder struct {
	Host      string    `json:"host"`
	PID       int       `json:"pid"`
	Since     time.Time `json:"since"`
	Heartbeat time.Time `json:"heartbeat"`
}

func (h Holder) String() string {
	return fmt.Sprintf("pid %d on host %s since %s", h.PID, h.Host, h.Since.Local().Format(time.RFC3339))
}

// HeldError reports a run directory whose writer lock another live process
// holds.
type HeldError struct {
	Dir    string
	Holder Holder
	Known  bool // false when the holder's record could not be read
}

func (e *HeldError) Error() string {
	if !e.Known {
		return fmt.Sprintf("%s is in use by another nightjar process (its lock record is unreadable)", e.Dir)
	}
	return fmt.Sprintf("%s is in use by another nightjar process: %s", e.Dir, e.Holder)
}

// Lock is a held writer lock. Release it when done; the process's exit
// releases the operating-system lock in any case.
type Lock struct {
	dir    string
	file   *os.File
	holder Holder
	mu     sync.Mutex
	quit   chan struct{}
	done   chan struct{}
}

// hostname is the host name recorded in lock records.
func hostname() string {
	h, err := os.Hostname()
	if err != nil || h == "" {
		return "unknown"
	}
	return h
}

// lockTries and lockWait: a writer retries the operating-system lock this
// often, so that a reader probing the lock at the same moment (Probe holds
// it shared for an instant) never makes a starting writer fail.
const (
	lockTries = 20
	lockWait  = 25 * time.Millisecond
)

// AcquireLock takes the writer lock of dir (which must exist), or returns a
// *HeldError naming the live holder. A record left by a dead holder (its
// pid gone on this host, or its heartbeat stale on another) is taken over.
// While held, a goroutine refreshes the heartbeat every HeartbeatEvery.
func AcquireLock(dir string) (*Lock, error) {
	f, err := os.OpenFile(filepath.Join(dir, LockName), os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("locking %s: %w", dir, err)
	}
	for try := 0; ; try++ {
		err = syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB)
		if err == nil || !errors.Is(err, syscall.EWOULDBLOCK) || try == lockTries {
			break
		}
		// A live writer's record means the lock is not a reader's
		// instant probe: refuse now rather than wait for the writer to
		// end (a short run could end within the retries, and the caller
		// would then meet a finished run instead of its holder).
		if h, ok := ReadHolder(dir); ok && alive(h, time.Now()) {
			f.Close()
			return nil, &HeldError{Dir: dir, Holder: h, Known: true}
		}
		time.Sleep(lockWait)
	}
	if err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			h, ok := ReadHolder(dir)
			return nil, &HeldError{Dir: dir, Holder: h, Known: ok}
		}
		return nil, fmt.Errorf("locking %s: %w", dir, err)
	}
	// The operating-system lock is ours; on a cluster file system another
	// node may still hold the run (flock is often node-local).
	if h, ok := ReadHolder(dir); ok && alive(h, time.Now()) && !(h.Host == hostname() && h.PID == os.Getpid()) {
		f.Close()
		return nil, &HeldError{Dir: dir, Holder: h, Known: true}
	}
	now := time.Now().UTC()
	l := &Lock{dir: dir, file: f, holder: Holder{Host: hostname(), PID: os.Getpid(), Since: now, Heartbeat: now},
		quit: make(chan struct{}), done: make(chan struct{})}
	if err := l.Beat(); err != nil {
		f.Close()
		return nil, err
	}
	go l.beatLoop()
	return l, nil
}

// alive tells whether the holder of a record counts as alive at now.
func alive(h Holder, now time.Time) bool {
	if h.Host == hostname() {
		return pidAlive(h.PID)
	}
	return now.Sub(h.Heartbeat) < StaleAfter
}

// pidAlive tells whether a process with this pid exists on this host.
func pidAlive(pid int) bool {
	if pid <= 0 {
		return false
	}
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}

func (l *Lock) beatLoop() {
	defer close(l.done)
	t := time.NewTicker(HeartbeatEvery)
	defer t.Stop()
	for {
		select {
		case <-l.quit:
			return
		case <-t.C:
			_ = l.Beat() // a missed beat is retried at the next tick
		}
	}
}

// Beat refreshes the heartbeat of the lock record. It is called every
// HeartbeatEvery by the lock itself and may be called at each checkpoint.
func (l *Lock) Beat() error {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.holder.Heartbeat = time.Now().UTC()
	b, err := json.Marshal(l.holder)
	if err != nil {
		return err
	}
	if err := AtomicWrite(filepath.Join(l.dir, HolderName), func(w io.Writer) error { _, err := w.Write(b); return err }); err != nil {
		return fmt.Errorf("writing the lock record of %s: %w", l.dir, err)
	}
	return nil
}

// Holder returns the lock's own record.
func (l *Lock) Holder() Holder {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.holder
}

// Release stops the heartbeat, removes the lock record and releases the
// operating-system lock.
func (l *Lock) Release() {
	close(l.quit)
	<-l.done
	l.mu.Lock()
	defer l.mu.Unlock()
	_ = os.Remove(filepath.Join(l.dir, HolderName))
	_ = syscall.Flock(int(l.file.Fd()), syscall.LOCK_UN)
	_ = l.file.Close()
}

// ReadHolder reads the lock record of dir; false when there is none or it
// cannot be read.
func ReadHolder(dir string) (Holder, bool) {
	b, err := os.ReadFile(filepath.Join(dir, HolderName))
	if err != nil {
		return Holder{}, false
	}
	var h Holder
	if json.Unmarshal(b, &h) != nil || h.PID == 0 {
		return Holder{}, false
	}
	return h, true
}

// Probe tells, without writing anything, whether a live process holds the
// writer lock of dir, and its record when known. It takes the
// operating-system lock shared for an instant if it can; a writer starting
// at that moment retries (see AcquireLock).
func Probe(dir string) (held bool, holder Holder, known bool) {
	holder, known = ReadHolder(dir)
	f, err := os.Open(filepath.Join(dir, LockName))
	if err != nil {
		// No lock file: no process of this build ever wrote here, but a
		// record on another host may still be alive.
		return known && alive(holder, time.Now()), holder, known
	}
	defer f.Close()
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_SH|syscall.LOCK_NB); err != nil {
		return true, holder, known
	}
	_ = syscall.Flock(int(f.Fd()), syscall.LOCK_UN)
	if known && holder.Host != hostname() && alive(holder, time.Now()) {
		return true, holder, known
	}
	return false, holder, known
}
