package pipeline

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"syscall"
)

// Writes are gathered into chunks of atomicChunkSize bytes that a
// background goroutine writes to the file, so the kernel's copy overlaps the
// encoding of the next row group. At most atomicChunks chunks exist.
const (
	atomicChunkSize = 1 << 20
	atomicChunks    = 8
)

// AtomicFile is a file written beside its target under a unique temporary
// name (".<base>.heft-tmp-<random>" in the same directory, so the final
// rename never crosses a file system). Commit syncs it, renames it over the
// target and syncs the directory; until then the target is untouched.
//
// The first write error is kept: later writes return it, Commit returns it
// after removing the temporary file. An AtomicFile is not safe for
// concurrent use.
type AtomicFile struct {
	target string
	f      *os.File
	out    io.Writer // f, or a failing writer in tests
	cur    []byte    // chunk being filled
	free   chan []byte
	full   chan []byte
	chunks int           // allocated so far
	wdone  chan struct{} // closed when the writer goroutine ends
	mu     sync.Mutex
	werr   error // first error of the writer goroutine
	err    error // sticky error seen by Write
	done   bool  // committed or aborted
}

// CreateAtomic opens a temporary file beside target. The file gets target's
// permissions if target exists, else 0666 less the umask, as os.Create
// would give. The temporary name carries the process id
// (".<base>.heft-tmp-<pid>-<random>"), so that temporary files a killed run
// left beside target are recognised and removed here; files of a live
// process, a concurrent run, are left alone.
func CreateAtomic(target string) (*AtomicFile, error) {
	dir, base := filepath.Split(target)
	if dir == "" {
		dir = "."
	}
	if base == "" {
		return nil, At(target, errors.New("output path names a directory, not a file"))
	}
	var perm os.FileMode
	if st, err := os.Stat(target); err == nil {
		if st.IsDir() {
			return nil, At(target, errors.New("output path is a directory"))
		}
		perm = st.Mode().Perm()
	}
	RemoveStaleTemps(dir, base)
	f, err := createTemp(dir, base)
	if err != nil {
		return nil, At(target, fmt.Errorf("create temporary output: %w", err))
	}
	if perm != 0 {
		if err := f.Chmod(perm); err != nil {
			f.Close()
			os.Remove(f.Name())
			return nil, At(target, fmt.Errorf("set output permissions: %w", err))
		}
	}
	return &AtomicFile{target: target, f: f, out: f}, nil
}

const tempMarker = ".heft-tmp-"

// createTemp creates ".<base>.heft-tmp-<pid>-<random>" in dir with mode
// 0666, which the kernel reduces by the umask (os.CreateTemp would give 0600).
func createTemp(dir, base string) (*os.File, error) {
	prefix := filepath.Join(dir, "."+base+tempMarker+strconv.Itoa(os.Getpid())+"-")
	for range 100 {
		f, err := os.OpenFile(prefix+strconv.FormatUint(uint64(rand.Uint32()), 36), os.O_RDWR|os.O_CREATE|os.O_EXCL, 0o666)
		if errors.Is(err, fs.ErrExist) {
			continue
		}
		return f, err
	}
	return nil, errors.New("no unused temporary name")
}

// RemoveStaleTemps removes the temporary files of targets named base in dir
// (all targets when base is "") whose process is no longer running: what a
// killed run leaves. It is best effort: a file that cannot be removed stays,
// and it is never output, being hidden and never renamed into place.
func RemoveStaleTemps(dir, base string) {
	pattern := "." + base + "*"
	if base != "" {
		pattern = "." + base + tempMarker + "*"
	}
	names, _ := filepath.Glob(filepath.Join(dir, globEscape(pattern)))
	for _, p := range names {
		name := filepath.Base(p)
		i := strings.LastIndex(name, tempMarker)
		if i < 0 {
			continue
		}
		rest := name[i+len(tempMarker):]
		j := strings.IndexByte(rest, '-')
		if j < 0 {
			continue
		}
		pid, err := strconv.Atoi(rest[:j])
		if err != nil || pid <= 0 || processAlive(pid) {
			continue
		}
		os.Remove(p)
	}
}

// globEscape quotes the glob metacharacters of a file name, keeping a
// trailing "*".
func globEscape(pattern string) string {
	star := strings.HasSuffix(pattern, "*")
	pattern = strings.TrimSuffix(pattern, "*")
	var b strings.Builder
	for _, r := range pattern {
		if strings.ContainsRune(`*?[\`, r) {
			b.WriteByte('\\')
		}
		b.WriteRune(r)
	}
	if star {
		b.WriteByte('*')
	}
	return b.String()
}

// processAlive reports whether a process with this id exists (signal 0
// checks without sending anything; EPERM means it exists under another user).
func processAlive(pid int) bool {
	if pid == os.Getpid() {
		return true
	}
	err := syscall.Kill(pid, 0)
	return err == nil || errors.Is(err, syscall.EPERM)
}

// WriteFileAtomic writes data to path through an AtomicFile: either the
// whole file appears at path or nothing changes there.
func WriteFileAtomic(path string, data []byte) error {
	af, err := CreateAtomic(path)
	if err != nil {
		return err
	}
	if _, err := af.Write(data); err != nil {
		af.Abort()
		return err
	}
	return af.Commit()
}

// Name returns the target path (not the temporary one).
func (a *AtomicFile) Name() string { return a.target }

// TempName returns the path of the temporary file.
func (a *AtomicFile) TempName() string { return a.f.Name() }

// Write copies p into the write-behind chunks; a failure of an earlier
// background write is returned here.
func (a *AtomicFile) Write(p []byte) (int, error) {
	if a.err == nil && a.done {
		a.err = At(a.target, errors.New("write after commit or abort"))
	}
	if a.err != nil {
		return 0, a.err
	}
	n := len(p)
	for len(p) > 0 {
		if a.cur == nil {
			a.cur = a.getChunk()
		}
		k := copy(a.cur[len(a.cur):cap(a.cur)], p)
		a.cur = a.cur[:len(a.cur)+k]
		p = p[k:]
		if len(a.cur) == cap(a.cur) {
			a.flushChunk()
		}
	}
	if err := a.writeErr(); err != nil {
		a.err = err
		return n, err
	}
	return n, nil
}

func (a *AtomicFile) start() {
	a.free = make(chan []byte, atomicChunks)
	a.full = make(chan []byte, atomicChunks)
	a.wdone = make(chan struct{})
	go func() {
		defer close(a.wdone)
		for c := range a.full {
			if a.writeErr() == nil {
				if _, err := a.out.Write(c); err != nil {
					a.mu.Lock()
					a.werr = At(a.target, fmt.Errorf("write: %w", bare(err)))
					a.mu.Unlock()
				}
			}
			a.free <- c[:0]
		}
	}()
}

func (a *AtomicFile) getChunk() []byte {
	if a.free == nil {
		a.start()
	}
	select {
	case c := <-a.free:
		return c
	default:
	}
	if a.chunks < atomicChunks {
		a.chunks++
		return make([]byte, 0, atomicChunkSize)
	}
	return <-a.free
}

func (a *AtomicFile) flushChunk() {
	if len(a.cur) > 0 {
		a.full <- a.cur
	}
	a.cur = nil
}

func (a *AtomicFile) writeErr() error {
	a.mu.Lock()
	defer a.mu.Unlock()
	return a.werr
}

// drain hands the last chunk to the writer goroutine, waits for it to end
// and returns the first write error.
func (a *AtomicFile) drain() error {
	if a.cur != nil {
		a.flushChunk()
	}
	if a.full != nil {
		close(a.full)
		<-a.wdone
		a.full = nil
	}
	if a.err != nil {
		return a.err
	}
	return a.writeErr()
}

// Commit waits for the pending writes, syncs the temporary file, renames it
// over the target and syncs the directory so the rename survives a crash.
// On any failure the temporary file is removed and the target is left as it
// was.
func (a *AtomicFile) Commit() error {
	if a.done {
		return At(a.target, errors.New("commit after commit or abort"))
	}
	a.done = true
	err := a.drain()
	if err == nil {
		if e := a.f.Sync(); e != nil {
			err = At(a.target, fmt.Errorf("sync: %w", bare(e)))
		}
	}
	if e := a.f.Close(); e != nil && err == nil {
		err = At(a.target, fmt.Errorf("close: %w", bare(e)))
	}
	if err == nil {
		if e := os.Rename(a.f.Name(), a.target); e != nil {
			err = At(a.target, fmt.Errorf("rename into place: %w", e))
		}
	}
	if err != nil {
		os.Remove(a.f.Name())
		return err
	}
	return syncDir(filepath.Dir(a.target))
}

// Abort removes the temporary file. It is idempotent and a no-op after
// Commit.
func (a *AtomicFile) Abort() error {
	if a.done {
		return nil
	}
	a.done = true
	a.drain()
	a.f.Close()
	if err := os.Remove(a.f.Name()); err != nil && !errors.Is(err, os.ErrNotExist) {
		return At(a.target, fmt.Errorf("remove temporary output: %w", err))
	}
	return nil
}

// bare drops the temporary file's name from an *fs.PathError: the error
// names the target, and the temporary name would only confuse.
func bare(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return At(dir, fmt.Errorf("open directory to sync: %w", err))
	}
	defer d.Close()
	if err := d.Sync(); err != nil {
		return At(dir, fmt.Errorf("sync directory: %w", err))
	}
	return nil
}

// SameFile reports whether paths a and b name the same existing file, so a
// command can refuse to overwrite one of its inputs. It is false when either
// path cannot be stat'ed.
func SameFile(a, b string) bool {
	sa, err := os.Stat(a)
	if err != nil {
		return false
	}
	sb, err := os.Stat(b)
	if err != nil {
		return false
	}
	return os.SameFile(sa, sb)
}

var _ io.Writer = (*AtomicFile)(nil)

// finishAtomic ends a sink's file: commit when the sink had no error, abort
// otherwise. A sink writing to a plain writer has no file (a is nil).
func finishAtomic(a *AtomicFile, err error) error {
	if a == nil {
		return err
	}
	if err != nil {
		a.Abort()
		return err
	}
	return a.Commit()
}

// CopyFrom appends n bytes of src, starting at offset off, after everything
// written so far. It first waits for the pending writes, so that the bytes
// land in order, then lets the kernel copy them (copy_file_range on Linux
// when src is a regular file), so they never pass through user memory.
// src's file offset is moved; the caller owns src.
func (a *AtomicFile) CopyFrom(src *os.File, off, n int64) error {
	if a.err == nil && a.done {
		a.err = At(a.target, errors.New("write after commit or abort"))
	}
	if a.err != nil {
		return a.err
	}
	if err := a.quiesce(); err != nil {
		a.err = err
		return err
	}
	if _, err := src.Seek(off, io.SeekStart); err != nil {
		return At(src.Name(), fmt.Errorf("seek: %w", err))
	}
	w, err := a.f.ReadFrom(&io.LimitedReader{R: src, N: n})
	if err == nil && w != n {
		err = fmt.Errorf("copied %d of %d bytes from %s: it ended early", w, n, src.Name())
	}
	if err != nil {
		a.err = At(a.target, fmt.Errorf("write: %w", bare(err)))
		return a.err
	}
	return nil
}

// quiesce hands the current chunk to the writer goroutine and waits until
// every chunk has been written (each is back on the free list), so the file
// holds everything written so far.
func (a *AtomicFile) quiesce() error {
	if a.cur != nil {
		a.flushChunk()
	}
	held := make([][]byte, 0, a.chunks)
	for range a.chunks {
		held = append(held, <-a.free)
	}
	for _, c := range held {
		a.free <- c
	}
	return a.writeErr()
}
