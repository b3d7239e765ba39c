package stage

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"github.com/apache/arrow-go/v18/arrow"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score/job"
)

// Config is a job as the launcher is given it.
type Config struct {
	Settings
	Inputs     []string // INPUT arguments, as heft score takes them: files, directories, globs
	Out        string   // output directory
	StatePath  string   // where the merged state goes ("" = none)
	ReportPath string   // where the report goes ("" = none)
	// PartRows is the rows of a unit of work: a Parquet file with more is
	// split into ranges of its row groups. 0 = DefaultPartRows.
	PartRows int64
}

// Job is a planned job: its inputs checked against the model and cut into
// parts, each with its output file.
type Job struct {
	cfg    Config
	parts  []Part
	inputs []string
	start  time.Time
}

// Parts returns the job's units of work in the order of the table's rows.
func (j *Job) Parts() []Part { return j.parts }

func usage(format string, args ...any) error {
	return &job.Error{Kind: job.KindUsage, Err: fmt.Errorf(format, args...)}
}

// Plan checks cfg as heft score checks its flags and inputs (every input
// against the model, the files of the table against each other, the
// outputs against the inputs), cuts the inputs into parts, and readies the
// output directory (a stale success marker and the temporary files of
// killed runs are removed). Nothing is written but the directory. The
// errors are heft score's, with the same kinds (job.Error, *pipeline.Error).
func Plan(ctx context.Context, cfg Config) (*Job, error) {
	start := time.Now()
	s := &cfg.Settings
	if cfg.Out == "" {
		return nil, usage("-o OUTDIR is required: a Beam job writes a directory, one file per input file or range of its row groups")
	}
	if s.Gate != (aggregate.Gate{}) || len(s.By) > 0 {
		if cfg.StatePath == "" && cfg.ReportPath == "" {
			return nil, usage("--by and the gate flags need --report or --state: the job writes what the accumulators found there")
		}
	}
	s.Accumulate = cfg.StatePath != "" || cfg.ReportPath != ""
	if cfg.PartRows < 0 || s.BatchRows < 0 || s.Workers < 0 || s.RowGroupRows < 0 {
		return nil, usage("--part-rows, --batch-rows, --workers and --row-group-rows must be positive")
	}
	if cfg.PartRows == 0 {
		cfg.PartRows = DefaultPartRows
	}
	// Workers resolve paths against their own working directory: give them
	// absolute ones. The report still lists the inputs as they were given.
	for _, p := range []*string{&cfg.Out, &cfg.StatePath, &cfg.ReportPath} {
		if *p == "" {
			continue
		}
		abs, err := filepath.Abs(*p)
		if err != nil {
			return nil, usage("%s: %v", *p, err)
		}
		*p = abs
	}
	for _, p := range []string{cfg.StatePath, cfg.ReportPath} {
		// Found now rather than after the whole table was scored.
		if st, err := os.Stat(filepath.Dir(p)); p != "" && (err != nil || !st.IsDir()) {
			return nil, &job.Error{Kind: job.KindOutput, Err: fmt.Errorf("%s: its directory does not exist", p)}
		}
	}
	if err := s.Policy.Validate(); err != nil {
		return nil, usage("%w", err)
	}
	if s.Unseen != fit.UnseenError && s.Unseen != fit.UnseenReference {
		return nil, usage("--unseen must be error or reference, not %q", s.Unseen)
	}
	b, err := os.ReadFile(s.ModelPath)
	if err != nil {
		return nil, &job.Error{Kind: job.KindModel, Err: err}
	}
	s.Model = b
	m, err := decodeModel(s.ModelPath, b)
	if err != nil {
		return nil, err
	}
	if s.Policy, err = s.Policy.Resolve(m); err != nil {
		return nil, &job.Error{Kind: job.KindModel, Err: err}
	}
	if s.Predictions && m.Outcome == nil {
		return nil, usage("--predictions needs outcome models; %s has none (fit with --outcome)", s.ModelPath)
	}
	sc, err := s.scoringFor(m, nil) // what every worker will build: check it here
	if err != nil {
		return nil, err
	}
	ins, err := pipeline.Expand(cfg.Inputs)
	if err != nil {
		return nil, err
	}
	for _, in := range ins {
		if in.Path == pipeline.Stdin {
			return nil, usage("a Beam job reads files; standard input cannot be split across workers")
		}
		for _, p := range []string{cfg.StatePath, cfg.ReportPath} {
			if p != "" && pipeline.SameFile(p, in.Path) {
				return nil, usage("output %s is one of the inputs; refusing to overwrite it", p)
			}
		}
	}
	if err := checkInputs(ctx, sc, ins); err != nil {
		return nil, err
	}
	j := &Job{cfg: cfg, start: start}
	for _, in := range ins {
		j.inputs = append(j.inputs, in.Path)
	}
	if j.parts, err = cut(ins, cfg); err != nil {
		return nil, err
	}
	if err := refuseStrangers(cfg.Out, j.parts); err != nil {
		return nil, err
	}
	if _, err := pipeline.NewOutDir(cfg.Out); err != nil {
		return nil, &job.Error{Kind: job.KindOutput, Err: err}
	}
	return j, nil
}

// cut cuts the inputs into parts, each with its output file, and refuses
// outputs that collide or that are inputs.
func cut(ins []pipeline.Input, cfg Config) ([]Part, error) {
	var parts []Part
	var all []string
	from := map[string]string{} // target → input
	for _, in := range ins {
		ranges, rows := []pipeline.RowGroupRange{{}}, []int64{-1}
		if in.Format == pipeline.FormatParquet {
			rgs, err := pipeline.RowGroups(in.Path)
			if err != nil {
				return nil, err
			}
			ranges, rows = splitRowGroups(rgs, cfg.PartRows), nil
			for _, r := range ranges {
				rows = append(rows, rangeRows(rgs, r))
			}
		}
		for k, r := range ranges {
			target := pipeline.Target(cfg.Out, partRel(in.Rel, r), cfg.Format.Ext())
			if prev, ok := from[target]; ok {
				return nil, usage("%s and %s would both be written to %s; pass their common parent directory instead", prev, in.Path, target)
			}
			from[target] = in.Path
			all = append(all, target)
			p := Part{Index: len(parts), Path: absPath(in.Path), Root: absPath(in.Root), Rel: in.Rel, Format: int(in.Format),
				Size: in.Size, First: r.First, N: r.N, Rows: rows[k], Target: target}
			for _, kv := range in.Partitions {
				p.PartKeys = append(p.PartKeys, kv.Key)
				p.PartValues = append(p.PartValues, kv.Value)
			}
			parts = append(parts, p)
		}
	}
	if err := pipeline.RefuseInputTargets(all, ins); err != nil {
		return nil, &job.Error{Kind: job.KindUsage, Err: err}
	}
	return parts, nil
}

// absPath is p made absolute, or p when it cannot be.
func absPath(p string) string {
	if p == "" {
		return p
	}
	if abs, err := filepath.Abs(p); err == nil {
		return abs
	}
	return p
}

// checkInputs checks every input against the model and the first input's
// columns, and that the accumulators accept the table (--by columns).
func checkInputs(ctx context.Context, sc *scoring, ins []pipeline.Input) error {
	var schema0 *arrow.Schema
	var path0 string
	for _, in := range ins {
		src, err := pipeline.Open(ctx, in, pipeline.SourceOptions{PartitionColumns: true})
		if err != nil {
			return err
		}
		s := src.Schema()
		src.Close()
		if err := sc.model.CheckSchema(s, in.Path); err != nil {
			return err
		}
		if schema0 == nil {
			schema0, path0 = s, in.Path
			if _, err := aggregate.New(sc.acfg, s); err != nil {
				return &job.Error{Kind: job.KindUsage, Err: err}
			}
		} else if err := pipeline.SameColumns(path0, schema0, in.Path, s); err != nil {
			return err
		}
	}
	return nil
}

// rangeRows is the rows of the row groups r of a file of row groups rgs.
func rangeRows(rgs []int64, r pipeline.RowGroupRange) int64 {
	if !r.All() {
		rgs = rgs[r.First : r.First+r.N]
	}
	var n int64
	for _, k := range rgs {
		n += k
	}
	return n
}

// refuseStrangers refuses an output directory holding data files this job
// will not write: a reader of the directory would take them for part of
// the table (a run with another --part-rows leaves other names, say).
func refuseStrangers(dir string, parts []Part) error {
	targets := map[string]bool{}
	for _, p := range parts {
		targets[p.Target] = true
	}
	var strangers []string
	// With a trailing separator the walk follows dir when it is a link, as
	// readers of the directory do.
	root := dir + string(filepath.Separator)
	err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		name := d.Name()
		if d.IsDir() {
			if p != root && (strings.HasPrefix(name, ".") || strings.HasPrefix(name, "_")) {
				return filepath.SkipDir
			}
			return nil
		}
		if _, known := pipeline.FormatOf(p); !known || strings.HasPrefix(name, ".") || strings.HasPrefix(name, "_") {
			return nil
		}
		if !targets[p] {
			strangers = append(strangers, p)
		}
		return nil
	})
	if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return &job.Error{Kind: job.KindOutput, Err: err}
	}
	if len(strangers) == 0 {
		return nil
	}
	slices.Sort(strangers)
	more := ""
	if len(strangers) > 3 {
		more = fmt.Sprintf(" and %d more", len(strangers)-3)
		strangers = strangers[:3]
	}
	return usage("output directory %s holds data files this job does not write (%s%s): readers would count their rows too; remove them or choose an empty directory",
		dir, strings.Join(strangers, ", "), more)
}
