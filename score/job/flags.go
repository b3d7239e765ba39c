package job

import (
	"strings"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// FlagSet is what both flag packages heft's binaries use offer (the
// standard library's flag.FlagSet, for Beam's launcher, and pflag's, under
// cobra), so that heft score and heft-beam define their shared flags once.
type FlagSet interface {
	StringVar(p *string, name, value, usage string)
	BoolVar(p *bool, name string, value bool, usage string)
	Float64Var(p *float64, name string, value float64, usage string)
	IntVar(p *int, name string, value int, usage string)
	Int64Var(p *int64, name string, value int64, usage string)
}

// Flags are the score flags heft score and heft-beam share: the estimand
// and positivity policies, the appended columns, the Parquet output, the
// accumulators' outputs, segments and the gate.
type Flags struct {
	Estimand       string
	Policy         score.Policy // Estimand is set from the flag by the command
	Unseen         string
	Columns        score.Columns
	Compression    string
	RowGroupRows   int64
	Reencode       bool
	BatchRows      int
	State, Report  string
	By             string
	MinSegmentRows int
	MaxSegments    int
	Gate           aggregate.Gate
}

// ByColumns is the --by value as column names: comma-separated, blanks
// trimmed, empty names dropped.
func (f *Flags) ByColumns() []string {
	var out []string
	for _, c := range strings.Split(f.By, ",") {
		if c = strings.TrimSpace(c); c != "" {
			out = append(out, c)
		}
	}
	return out
}

// Define defines f's flags on fs with heft's defaults.
func (f *Flags) Define(fs FlagSet) {
	f.Columns = score.DefaultColumns()
	fs.StringVar(&f.Estimand, "estimand", score.ATE, "weights for: ate, att, atc or overlap")
	fs.BoolVar(&f.Policy.Stabilize, "stabilize", false, "multiply weights by the marginal share of the row's arm at fit")
	fs.Float64Var(&f.Policy.Clip, "clip", 0, "bound propensities to [ε, 1−ε]")
	fs.Float64Var(&f.Policy.Trim, "trim", 0, "zero the weight where e is outside [α, 1−α] (e.g. 0.1)")
	fs.Float64Var(&f.Policy.TruncateQ, "truncate-quantile", 0, "cap weights at the fit sample's q-th weight quantile (e.g. 0.99)")
	fs.StringVar(&f.Unseen, "unseen", fit.UnseenError, "categorical levels not seen at fit: error, or reference (encode as the reference level and count)")
	fs.BoolVar(&f.Columns.Predictions, "predictions", false, "also write the outcome models' predictions mu0 and mu1")
	fs.StringVar(&f.Columns.Propensity, "propensity-column", f.Columns.Propensity, "name of the appended propensity column")
	fs.StringVar(&f.Columns.Weight, "weight-column", f.Columns.Weight, "name of the appended weight column")
	fs.StringVar(&f.Columns.InSupport, "in-support-column", f.Columns.InSupport, "name of the appended in-support column")
	fs.StringVar(&f.Columns.Mu0, "mu0-column", f.Columns.Mu0, "name of the appended control-outcome prediction")
	fs.StringVar(&f.Columns.Mu1, "mu1-column", f.Columns.Mu1, "name of the appended treated-outcome prediction")
	fs.StringVar(&f.Compression, "compression", "snappy", "Parquet compression: snappy, zstd or none (when column chunks are copied and this is not given, the appended columns take the input's codec)")
	fs.Int64Var(&f.RowGroupRows, "row-group-rows", 131072, "rows per Parquet row group in the output (re-encodes every column)")
	fs.BoolVar(&f.Reencode, "reencode", false, "decode and re-encode every column rather than copy the input's column chunks")
	fs.IntVar(&f.BatchRows, "batch-rows", 65536, "rows per batch in flight (memory is bounded by batch size × queue depth); by default fewer for inputs of more than 16 columns read")
	fs.StringVar(&f.State, "state", "", "write the mergeable accumulator state here (for 'heft merge')")
	fs.StringVar(&f.Report, "report", "", "write the report JSON here (- for stdout)")
	fs.StringVar(&f.By, "by", "", "segment columns: estimates and balance per segment")
	fs.IntVar(&f.MinSegmentRows, "min-segment-rows", 100, "suppress segments with fewer rows than this in either arm")
	fs.IntVar(&f.MaxSegments, "max-segments", 1000, "fail when there are more segments than this")
	fs.Float64Var(&f.Gate.MaxSMD, "max-smd", 0, "gate: fail when any term's weighted |SMD| exceeds this (e.g. 0.1)")
	fs.Float64Var(&f.Gate.MinESSShare, "min-ess-share", 0, "gate: fail when an arm's effective sample size is below this share of its rows")
	fs.Float64Var(&f.Gate.MaxPSI, "max-psi", 0, "gate: fail when the propensity drift index (PSI) since the fit exceeds this (e.g. 0.25)")
}
