package pipeline

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net/url"
	"os"
	"path/filepath"
	"sort"
	"strings"
)

// Format is the file format of an input.
type Format int

const (
	FormatParquet Format = iota + 1
	FormatArrowFile
	FormatArrowStream
	FormatCSV
)

func (f Format) String() string {
	switch f {
	case FormatParquet:
		return "parquet"
	case FormatArrowFile:
		return "arrow-file"
	case FormatArrowStream:
		return "arrow-stream"
	case FormatCSV:
		return "csv"
	}
	return fmt.Sprintf("Format(%d)", int(f))
}

// Partition is one hive-style key=value folder between the argument's root
// and the file. Value is URL-unescaped, as hive writers escape it.
type Partition struct{ Key, Value string }

// hiveNull is the folder value hive writers use for a null partition key.
const hiveNull = "__HIVE_DEFAULT_PARTITION__"

// Input is one file to read.
type Input struct {
	Path       string // as opened; "-" is standard input (an Arrow IPC stream)
	Root       string // the directory argument it was found under ("" for a plain file argument)
	Rel        string // path relative to Root (the base name for a plain file; "stdin" for "-"), used to lay out per-file outputs
	Format     Format
	Size       int64 // bytes, -1 for stdin
	Partitions []Partition
}

// Stdin is the Path of the input read from standard input.
const Stdin = "-"

// formatByExt maps a lower-case file extension to its format.
var formatByExt = map[string]Format{
	".parquet": FormatParquet,
	".parq":    FormatParquet,
	".pq":      FormatParquet,
	".arrow":   FormatArrowFile,
	".feather": FormatArrowFile,
	".ipc":     FormatArrowFile,
	".arrows":  FormatArrowStream,
	".csv":     FormatCSV,
}

// FormatOf returns the format a file name's extension implies, or false.
func FormatOf(name string) (Format, bool) {
	f, ok := formatByExt[strings.ToLower(filepath.Ext(name))]
	return f, ok
}

// Expand turns command-line INPUT arguments into files:
//   - "-" is standard input, an Arrow IPC stream (at most once);
//   - an existing file is taken as it is, its format from the extension or,
//     failing that, from its magic bytes (PAR1, ARROW1, or an IPC stream's
//     0xFFFFFFFF continuation marker);
//   - a directory (or a symlink to one; linked folders below it are not
//     followed) is walked recursively in lexical order, keeping files with a
//     known extension and skipping names that start with '.' or '_' (such as
//     _SUCCESS or .crc files and _temporary folders); key=value folders
//     below it are recorded as Partitions;
//   - anything else containing *, ? or [ is a filepath.Glob pattern. Its
//     matches are taken like directory entries (known extensions, no hidden
//     names; a matched directory is walked), rooted at the pattern's longest
//     literal directory prefix so that Rel stays unique and key=value folders
//     matched by the pattern become Partitions.
//
// An argument that names nothing, a glob with no usable match and a
// directory with no data files are errors naming the argument. The result is
// sorted within each argument, arguments in order, with later duplicates of
// a path dropped.
func Expand(args []string) ([]Input, error) {
	if len(args) == 0 {
		return nil, errors.New("no input given")
	}
	var out []Input
	seen := make(map[string]bool)
	stdin := false
	add := func(in Input) {
		key := in.Path
		if key != Stdin {
			if abs, err := filepath.Abs(in.Path); err == nil {
				key = abs
			}
		}
		if seen[key] {
			return
		}
		seen[key] = true
		out = append(out, in)
	}
	for _, arg := range args {
		if arg == Stdin {
			if stdin {
				return nil, errors.New(`standard input "-" given more than once`)
			}
			stdin = true
			add(Input{Path: Stdin, Rel: "stdin", Format: FormatArrowStream, Size: -1})
			continue
		}
		ins, err := expandArg(arg)
		if err != nil {
			return nil, err
		}
		for _, in := range ins {
			add(in)
		}
	}
	return out, nil
}

func expandArg(arg string) ([]Input, error) {
	info, err := os.Stat(arg)
	switch {
	case err == nil && info.IsDir():
		ins, err := walkDir(arg, arg)
		if err != nil {
			return nil, err
		}
		if len(ins) == 0 {
			return nil, fmt.Errorf("input %q: directory holds no data files (.parquet, .arrow, .arrows, .csv, ...)", arg)
		}
		return ins, nil
	case err == nil:
		f, ok := FormatOf(arg)
		if !ok {
			if f, err = sniff(arg); err != nil {
				return nil, fmt.Errorf("input %q: %w", arg, err)
			}
		}
		return []Input{{Path: arg, Rel: filepath.Base(arg), Format: f, Size: info.Size()}}, nil
	case !errors.Is(err, fs.ErrNotExist):
		return nil, fmt.Errorf("input %q: %w", arg, err)
	case !strings.ContainsAny(arg, "*?["):
		return nil, fmt.Errorf("input %q: no such file or directory", arg)
	}
	matches, err := filepath.Glob(arg)
	if err != nil {
		return nil, fmt.Errorf("input %q: %w", arg, err)
	}
	root := globRoot(arg)
	var out []Input
	for _, m := range matches { // Glob sorts its matches
		if hidden(filepath.Base(m)) {
			continue
		}
		info, err := os.Stat(m)
		if err != nil {
			return nil, fmt.Errorf("input %q: %w", arg, err)
		}
		if info.IsDir() {
			ins, err := walkDir(root, m)
			if err != nil {
				return nil, err
			}
			out = append(out, ins...)
			continue
		}
		f, ok := FormatOf(m)
		if !ok {
			continue
		}
		in, err := rooted(root, m, f, info.Size())
		if err != nil {
			return nil, err
		}
		out = append(out, in)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("input %q: pattern matches no data files", arg)
	}
	return out, nil
}

// walkDir lists the data files under dir, lexically, relative to root.
func walkDir(root, dir string) ([]Input, error) {
	var out []Input
	start := dir
	if info, err := os.Lstat(dir); err == nil && info.Mode()&fs.ModeSymlink != 0 {
		// WalkDir does not follow a symlinked root; "link/." resolves it.
		start = dir + string(filepath.Separator) + "."
	}
	err := filepath.WalkDir(start, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if path != start && hidden(d.Name()) {
			if d.IsDir() {
				return filepath.SkipDir
			}
			return nil
		}
		if d.IsDir() {
			return nil
		}
		f, ok := FormatOf(path)
		if !ok {
			return nil
		}
		info, err := os.Stat(path) // follows a symlinked file
		if err != nil {
			return err
		}
		if info.IsDir() {
			return nil
		}
		in, err := rooted(root, path, f, info.Size())
		if err != nil {
			return err
		}
		out = append(out, in)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("input %q: %w", dir, err)
	}
	return out, nil
}

func rooted(root, path string, f Format, size int64) (Input, error) {
	rel, err := filepath.Rel(root, path)
	if err != nil {
		return Input{}, err
	}
	return Input{Path: path, Root: root, Rel: rel, Format: f, Size: size, Partitions: partitions(rel)}, nil
}

// hidden reports names that data writers use for markers and scratch space.
func hidden(name string) bool {
	return strings.HasPrefix(name, ".") || strings.HasPrefix(name, "_")
}

// partitions reads the key=value folders of a relative path, outermost first.
func partitions(rel string) []Partition {
	dir := filepath.Dir(rel)
	if dir == "." {
		return nil
	}
	var out []Partition
	for _, part := range strings.Split(filepath.ToSlash(dir), "/") {
		k, v, ok := strings.Cut(part, "=")
		if !ok || k == "" {
			continue
		}
		if u, err := url.PathUnescape(v); err == nil {
			v = u
		}
		out = append(out, Partition{Key: k, Value: v})
	}
	return out
}

// globRoot is the longest directory prefix of pattern free of glob syntax.
func globRoot(pattern string) string {
	i := strings.IndexAny(pattern, "*?[")
	if i < 0 {
		return filepath.Dir(pattern)
	}
	j := strings.LastIndexByte(pattern[:i], filepath.Separator)
	if filepath.Separator != '/' {
		j = max(j, strings.LastIndexByte(pattern[:i], '/'))
	}
	switch {
	case j < 0:
		return "."
	case j == 0:
		return pattern[:1]
	}
	return pattern[:j]
}

// sniff decides the format of a file without a known extension from its
// first bytes.
func sniff(path string) (Format, error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, err
	}
	defer f.Close()
	var head [8]byte
	n, err := io.ReadFull(f, head[:])
	if err != nil && !errors.Is(err, io.ErrUnexpectedEOF) && !errors.Is(err, io.EOF) {
		return 0, err
	}
	b := head[:n]
	switch {
	case bytes.HasPrefix(b, []byte("PAR1")):
		return FormatParquet, nil
	case bytes.HasPrefix(b, []byte("ARROW1")):
		return FormatArrowFile, nil
	case bytes.HasPrefix(b, []byte{0xff, 0xff, 0xff, 0xff}):
		return FormatArrowStream, nil
	}
	exts := make([]string, 0, len(formatByExt))
	for e := range formatByExt {
		exts = append(exts, e)
	}
	sort.Strings(exts)
	return 0, fmt.Errorf("unknown format (extension is not one of %s, and the file starts with neither PAR1 nor ARROW1)", strings.Join(exts, " "))
}
