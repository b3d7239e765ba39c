package pipeline

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// atomicBufferSize batches the many small writes of the Parquet and IPC
// encoders into few system calls.
const atomicBufferSize = 1 << 20

// AtomicFile is a file written beside its target under a unique temporary
// name (".<base>.heft-tmp-<random>" in the same directory, so the final
// rename never crosses a file system). Commit syncs it, renames it over the
// target and syncs the directory; until then the target is untouched.
//
// The first write error is kept: later writes return it, Commit returns it
// after removing the temporary file.
type AtomicFile struct {
	target string
	f      *os.File
	bw     *bufio.Writer
	err    error // first write error, sticky
	done   bool  // committed or aborted
}

// CreateAtomic opens a temporary file beside target. The file gets target's
// permissions if target exists and 0644 otherwise.
func CreateAtomic(target string) (*AtomicFile, error) {
	dir, base := filepath.Split(target)
	if dir == "" {
		dir = "."
	}
	if base == "" {
		return nil, At(target, errors.New("output path names a directory, not a file"))
	}
	perm := os.FileMode(0o644)
	if st, err := os.Stat(target); err == nil {
		if st.IsDir() {
			return nil, At(target, errors.New("output path is a directory"))
		}
		perm = st.Mode().Perm()
	}
	f, err := os.CreateTemp(dir, "."+base+".heft-tmp-*")
	if err != nil {
		return nil, At(target, fmt.Errorf("create temporary output: %w", err))
	}
	if err := f.Chmod(perm); err != nil {
		f.Close()
		os.Remove(f.Name())
		return nil, At(target, fmt.Errorf("set output permissions: %w", err))
	}
	return &AtomicFile{target: target, f: f, bw: bufio.NewWriterSize(f, atomicBufferSize)}, nil
}

// Name returns the target path (not the temporary one).
func (a *AtomicFile) Name() string { return a.target }

// TempName returns the path of the temporary file.
func (a *AtomicFile) TempName() string { return a.f.Name() }

// Write writes to the temporary file.
func (a *AtomicFile) Write(p []byte) (int, error) {
	if a.err != nil {
		return 0, a.err
	}
	if a.done {
		return 0, At(a.target, errors.New("write after commit or abort"))
	}
	n, err := a.bw.Write(p)
	if err != nil {
		a.err = At(a.target, fmt.Errorf("write: %w", err))
		return n, a.err
	}
	return n, nil
}

// Commit flushes and syncs the temporary file, renames it over the target and
// syncs the directory so the rename survives a crash. On any failure the
// temporary file is removed and the target is left as it was.
func (a *AtomicFile) Commit() error {
	if a.done {
		return At(a.target, errors.New("commit after commit or abort"))
	}
	err := a.err
	if err == nil {
		if e := a.bw.Flush(); e != nil {
			err = At(a.target, fmt.Errorf("write: %w", e))
		}
	}
	if err == nil {
		if e := a.f.Sync(); e != nil {
			err = At(a.target, fmt.Errorf("sync: %w", e))
		}
	}
	if e := a.f.Close(); e != nil && err == nil {
		err = At(a.target, fmt.Errorf("close: %w", e))
	}
	if err == nil {
		if e := os.Rename(a.f.Name(), a.target); e != nil {
			err = At(a.target, fmt.Errorf("rename into place: %w", e))
		}
	}
	a.done = true
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
	a.f.Close()
	if err := os.Remove(a.f.Name()); err != nil && !errors.Is(err, os.ErrNotExist) {
		return At(a.target, fmt.Errorf("remove temporary output: %w", err))
	}
	return nil
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
