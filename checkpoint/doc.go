// Package checkpoint owns nightjar's run directory: the JSON manifest, the
// binary state files holding optimiser state, the neighbour graph and the
// affinity matrix, and the atomic writing of every file a run produces.
//
// The package stores bytes, not numbers: callers turn their slices into
// sections with the little-endian helpers (EncodeValues and View to write,
// DecodeValues, ShareValues and their Section forms to read; see Element for
// which to use when) and decide what each section means. It never imports the
// numeric packages. ReadFile reads a file section by section, so that a large
// file is held in memory once.
//
// # State file layout (format version 1)
//
// Every binary file written by this package ("state file", extension .njs)
// has the same container layout. All integers are little-endian.
//
//	offset        size  field
//	0             8     magic: 0x8A 'N' 'J' 'S' 'T' 'A' '\r' '\n'
//	8             4     format version, uint32 (currently 1)
//	12            1     kind length K, 1 ≤ K ≤ 64
//	13            K     kind, printable ASCII (e.g. "state", "graph", "affinity")
//	13+K          4     section count n, uint32
//	then n table entries, each:
//	              1     name length L, 1 ≤ L ≤ 255
//	              L     name, valid UTF-8 without control characters, unique in the file
//	              8     offset of the section's bytes from the start of the file, uint64
//	              8     length of the section's bytes, uint64
//	              4     CRC-32C (Castagnoli) of the section's bytes, uint32
//	then          4     CRC-32C of every byte before this field (magic … last entry)
//	then the section bytes, in table order, contiguous, without padding;
//	the file ends exactly where the last section ends.
//
// The layout is canonical: a given kind and list of sections encode to exactly
// one byte string, and a decoder accepts nothing else (no gaps, no overlap, no
// trailing bytes). A reader checks, in order: the magic number (MagicError),
// the format version (VersionError), the table and its checksum
// (CorruptError without a section), the kind (KindError), then each section's
// bounds and checksum (CorruptError naming the section). A truncated file
// therefore always fails, naming the first section whose bytes are missing.
//
// CRC-32C is used because, like any 32-bit CRC whose generator has more
// than one term, it detects every single-bit error and every error burst of
// at most 32 bits (standard CRC theory, Peterson & Brown 1961), its
// polynomial was chosen for a large Hamming distance on long blocks
// (Castagnoli, Bräuer & Herrmann, "Optimization of cyclic redundancy-check
// codes with 24 and 32 parity bits", IEEE Trans. Commun. 41(6), 1993), and
// Go computes it with CPU instructions.
// It guards against accidents (bad disks, torn writes), not against tampering.
//
// # Run directory
//
// A run directory (see Run) holds
//
//	manifest.json          the manifest (ManifestName), replaced by SaveManifest
//	manifest.prev.json     the manifest as it was before its last save
//	                       (PrevManifestName), used when manifest.json fails
//	                       its checksum or cannot be read
//	NAME.njs               artifacts written by SaveArtifact(NAME, …); the
//	                       nightjar command writes neighbours.njg.njs (the
//	                       neighbour graph), affinities.njp.njs (P) and
//	                       features.njs (the features the map was made from)
//	state-NNNNNNNNN.njs    the two newest optimiser states (SaveState), NNNNNNNNN
//	                       the nine-digit iteration number
//	.lock, lock.json       the writer lock (LockName) and its record
//	                       (HolderName: host, pid, start, heartbeat)
//
// and the final outputs the caller writes with AtomicWrite into Run.Path
// (the nightjar command writes embedding.parquet, map.png, map.html and
// report.json). Every file is written to a temporary name in the same
// directory ("." + name + ".tmp-" + random digits), synced, renamed over the
// final name, and the directory is synced, so a kill at any moment leaves
// either the old or the new file; the holder of the writer lock removes
// temporary files a kill left behind (RemoveTemporaries), and nobody else
// does, since another process's temporary may be a write in progress.
// A Run writes its files through Run.FS (OSFS by default), which tests
// replace to make a step fail or stop.
//
// # Manifest
//
// manifest.json is JSON (Manifest). Version 2 carries a run id, made when
// the run is created and written as the section "checkpoint.run" into every
// artifact and state the run saves; a file whose run id differs (copied from
// another run) is refused with a *ForeignError. It also carries a checksum:
// the hex SHA-256 of its own JSON (compact, with the checksum empty). A
// manifest whose checksum fails was damaged or edited outside nightjar and
// is never used: Open falls back on manifest.prev.json if that one is valid
// (and says so in Run.Fallback), and refuses otherwise. Version-1 manifests
// (no run id, no checksum) are read as they are and saved again as version 2.
//
// # Writer lock
//
// One process at a time writes into a run directory. AcquireLock takes an
// flock on .lock, held for the life of the process, and writes lock.json
// with the holder's host, pid, start time and a heartbeat refreshed every
// HeartbeatEvery. Since cluster file systems often honour flock within one
// node only, the record decides across nodes: a holder on another host
// counts as alive until its heartbeat is older than StaleAfter, one on the
// same host until its pid is gone. Probe tells whether a run is held
// without writing anything.
package checkpoint
