package pipeline

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
)

// SuccessMarker is the empty file OutDir.Success writes last, so a consumer
// can tell a complete output directory from one a failed run left behind.
const SuccessMarker = "_SUCCESS"

// OutDir manages a directory output: one output file per input file at its
// relative path (partition folders kept), each committed atomically by its
// own sink. A stale _SUCCESS from an earlier run is removed when the OutDir
// is created, before any file is written; Success writes a new one only after
// every file was committed.
type OutDir struct {
	dir string
}

// NewOutDir creates dir if needed and removes a stale success marker and
// the temporary files of runs that were killed.
func NewOutDir(dir string) (*OutDir, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, At(dir, fmt.Errorf("create output directory: %w", err))
	}
	marker := filepath.Join(dir, SuccessMarker)
	if err := os.Remove(marker); err != nil && !errors.Is(err, os.ErrNotExist) {
		return nil, At(marker, fmt.Errorf("remove stale success marker: %w", err))
	}
	// Temporary files of killed runs are never output (hidden, never renamed
	// into place), but they hold disk space: sweep them, partition folders too.
	// (The trailing separator makes the walk follow dir when it is a link.)
	filepath.WalkDir(dir+string(filepath.Separator), func(p string, d fs.DirEntry, err error) error {
		if err == nil && d.IsDir() {
			RemoveStaleTemps(p, "")
		}
		return nil
	})
	if err := syncDir(dir); err != nil {
		return nil, err
	}
	return &OutDir{dir: dir}, nil
}

// Dir returns the output directory.
func (d *OutDir) Dir() string { return d.dir }

// Path returns the target for an input's relative path rel with its
// extension replaced by ext (".parquet", say), creating the partition
// folders it needs. A rel that would leave the directory is kept inside it.
func (d *OutDir) Path(rel string, ext string) string {
	p := Target(d.dir, rel, ext)
	os.MkdirAll(filepath.Dir(p), 0o755) // an error resurfaces when the file is created
	return p
}

// Target is the path OutDir.Path gives rel under dir, creating nothing:
// for checking the outputs of a run before it writes any.
func Target(dir, rel, ext string) string {
	rel = filepath.Clean("/" + filepath.FromSlash(rel))[1:]
	if e := filepath.Ext(rel); e != "" {
		rel = strings.TrimSuffix(rel, e)
	}
	return filepath.Join(dir, rel+ext)
}

// RefuseInputTargets fails when any of targets is one of the inputs, the
// same file by any path or link: an output directory that is (or holds) an
// input directory would otherwise have its inputs replaced by their scored
// copies. Targets that do not exist yet cost one failed stat each.
func RefuseInputTargets(targets []string, ins []Input) error {
	var infos []os.FileInfo
	var paths []string
	for _, in := range ins {
		if in.Path == Stdin {
			continue
		}
		if st, err := os.Stat(in.Path); err == nil {
			infos, paths = append(infos, st), append(paths, in.Path)
		}
	}
	for _, t := range targets {
		st, err := os.Stat(t)
		if err != nil {
			continue
		}
		for i, in := range infos {
			if os.SameFile(st, in) {
				return fmt.Errorf("output %s is the input %s; refusing to overwrite it (choose an output directory outside the inputs)", t, paths[i])
			}
		}
	}
	return nil
}

// Success writes the empty success marker, atomically. Call it only after
// every output file's sink closed without error.
func (d *OutDir) Success() error {
	af, err := CreateAtomic(filepath.Join(d.dir, SuccessMarker))
	if err != nil {
		return err
	}
	return af.Commit()
}
