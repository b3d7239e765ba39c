package aggregate

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"slices"
	"sort"
	"sync"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score"
)

// StateFormat and StateVersion identify a state file. A reader refuses a
// newer version.
const (
	StateFormat  = "heft-state"
	StateVersion = 1
)

// Config configures a State.
type Config struct {
	Model          *fit.Model
	Policy         score.Policy
	By             []string // segment columns (--by)
	MinSegmentRows int      // per arm; 0 means DefaultMinSegmentRows
	MaxSegments    int      // 0 means DefaultMaxSegments
	Gate           Gate
}

// Gate holds the thresholds a run must meet; 0 means not checked.
type Gate struct {
	MaxSMD      float64 `json:"max_smd,omitempty"`       // largest allowed weighted |SMD| of any term
	MinESSShare float64 `json:"min_ess_share,omitempty"` // smallest allowed ESS/n in either arm
	MaxPSI      float64 `json:"max_psi,omitempty"`       // largest allowed propensity PSI
}

// settings are the parts of Config that two states must share to merge.
type settings struct {
	By             []string `json:"by"`
	MinSegmentRows int      `json:"min_segment_rows"`
	MaxSegments    int      `json:"max_segments"`
	Gate           Gate     `json:"gate"`
}

// shared is a State's configuration, read-only and shared by every State
// made from it by Empty.
type shared struct {
	model    *fit.Model
	policy   score.Policy
	set      settings
	terms    []string    // without the intercept
	edges    [][]float64 // per term, for the KS distance
	effects  EffectsConfig
	seg      *segmenter // nil without By
	histSize int
	pool     sync.Pool // *scratch
	// dense turns off the sums over the ones of 0/1 terms; tests compare
	// the two.
	dense bool
}

// findBinary finds the 0/1 terms of X's first n rows into bt, or none in
// dense mode (the tests' oracle for the sums over the ones).
func (sh *shared) findBinary(bt *binaryTerms, X [][]float64, n int) {
	if sh.dense {
		bt.none(len(X))
		return
	}
	bt.find(X, n)
}

// scratch holds per-batch buffers, pooled so that the engine's one State
// per batch allocates no per-row memory.
type scratch struct {
	arm    []int8
	rows   arms
	w      []float64
	hist   []float64
	key    []byte
	cols   []arrow.Array
	rowSeg []int32
	idx    []int32
	local  []*segment
	count  []int32
	g      gathered
	bin    binaryTerms
	eff    EffectsScratch // shared by the run's and the segments' Effects
}

// accum is everything a State adds up; its JSON form is the state file's
// body.
type accum struct {
	Whole       cell  `json:"whole"`
	NullOutcome int64 `json:"null_outcome"`
	// BadWeight counts rows with a treatment but no finite weight (or one
	// whose square overflows); they are left out of the weighted figures.
	BadWeight int64            `json:"bad_weight"`
	Clipped   int64            `json:"clipped"`
	Trimmed   int64            `json:"trimmed"`
	Truncated int64            `json:"truncated"`
	Unseen    map[string]int64 `json:"unseen"`
	Missing   map[string]int64 `json:"missing_imputed"`
	Overlap   *overlap         `json:"overlap"`
	Drift     *drift           `json:"drift"`
	Segments  []*segment       `json:"segments,omitempty"` // sorted by key when written

	seg map[string]*segment
}

// State is the mergeable summary of a run: every figure of the report, in
// memory that does not grow with the rows. It implements score.Accumulator.
// A State is used by one goroutine at a time.
type State struct {
	// Inputs and RunSeconds are set by the caller for the report header;
	// Merge joins the inputs and adds the seconds.
	Inputs     []string
	RunSeconds float64

	sh    *shared
	a     accum
	stamp uint64 // counts Add calls, to number segments per batch
}

var _ score.Accumulator = (*State)(nil)

// New returns an empty State. schema is the input's, to check that the By
// columns exist; it may be nil without By.
func New(cfg Config, schema *arrow.Schema) (*State, error) {
	set := settings{By: slices.Clone(cfg.By), MinSegmentRows: cfg.MinSegmentRows, MaxSegments: cfg.MaxSegments, Gate: cfg.Gate}
	if set.MinSegmentRows == 0 {
		set.MinSegmentRows = DefaultMinSegmentRows
	}
	if set.MaxSegments == 0 {
		set.MaxSegments = DefaultMaxSegments
	}
	sh, err := newShared(cfg.Model, cfg.Policy, set)
	if err != nil {
		return nil, err
	}
	if len(set.By) > 0 {
		if schema == nil {
			return nil, fmt.Errorf("--by %s: no input schema to find the columns in", quoteList(set.By))
		}
		for _, name := range set.By {
			if len(schema.FieldIndices(name)) == 0 {
				return nil, fmt.Errorf("--by column %q is not in the input (columns: %s)", name, joinNames(fieldNames(schema)))
			}
		}
	}
	return sh.empty(), nil
}

func joinNames(n []string) string { return quoteList(n) }

func newShared(m *fit.Model, p score.Policy, set settings) (*shared, error) {
	if m == nil {
		return nil, errors.New("aggregate: no model")
	}
	if err := p.Validate(); err != nil {
		return nil, err
	}
	if set.MinSegmentRows < 0 {
		return nil, fmt.Errorf("minimum segment rows is %d; want a positive number", set.MinSegmentRows)
	}
	if set.MaxSegments < 0 {
		return nil, fmt.Errorf("maximum segments is %d; want a positive number", set.MaxSegments)
	}
	g := set.Gate
	for _, c := range []struct {
		name string
		v    float64
	}{{"--max-smd", g.MaxSMD}, {"--min-ess-share", g.MinESSShare}, {"--max-psi", g.MaxPSI}} {
		if c.v < 0 || math.IsNaN(c.v) || math.IsInf(c.v, 0) {
			return nil, fmt.Errorf("gate %s is %v; want a finite number ≥ 0 (0 = not checked)", c.name, c.v)
		}
	}
	if g.MinESSShare > 1 {
		return nil, fmt.Errorf("gate --min-ess-share is %v; an effective sample size share is at most 1", g.MinESSShare)
	}
	seen := map[string]bool{}
	for _, b := range set.By {
		if seen[b] {
			return nil, fmt.Errorf("--by names column %q twice", b)
		}
		seen[b] = true
	}
	nterms := len(m.Propensity.Coef) - 1
	if nterms < 0 {
		return nil, errors.New("model file: the propensity model has no coefficients")
	}
	ref := &m.Reference
	if len(ref.Terms) != nterms {
		return nil, fmt.Errorf("model file: reference has %d terms, the propensity model %d besides the intercept", len(ref.Terms), nterms)
	}
	sh := &shared{model: m, policy: p, set: set, terms: make([]string, nterms), edges: make([][]float64, nterms)}
	maxBins := 0
	for j, t := range ref.Terms {
		sh.terms[j] = t.Term
		if !sortedFinite(t.Edges) {
			return nil, fmt.Errorf("model file: reference edges of term %q are not finite and increasing", t.Term)
		}
		sh.edges[j] = t.Edges
		maxBins = max(maxBins, len(t.Edges)+1)
	}
	if !sortedFinite(ref.PropensityEdges) {
		return nil, errors.New("model file: reference propensity_edges are not finite and increasing")
	}
	if !sortedFinite(ref.PropensityDeciles) {
		return nil, errors.New("model file: reference propensity_deciles are not finite and increasing")
	}
	if len(ref.DecileCounts) != 0 && len(ref.DecileCounts) != len(ref.PropensityDeciles)+1 {
		return nil, fmt.Errorf("model file: %d propensity decile counts for %d deciles; want one more count than deciles", len(ref.DecileCounts), len(ref.PropensityDeciles))
	}
	maxBins = max(maxBins, len(ref.PropensityEdges)-1)
	sh.histSize = maxBins
	sh.effects = EffectsConfig{Policy: p, NTerms: len(m.Propensity.Coef)}
	if m.Outcome != nil {
		sh.effects.HasOutcome = true
		sh.effects.OutcomeKind = m.Outcome.Kind
	}
	if len(set.By) > 0 {
		sh.seg = &segmenter{by: set.By, max: set.MaxSegments}
	}
	// room for both arms' decile histograms, which balance bins together
	sh.pool.New = func() any { return &scratch{hist: make([]float64, max(sh.histSize, 2*decileBins))} }
	return sh, nil
}

func sortedFinite(x []float64) bool {
	for i, v := range x {
		if math.IsNaN(v) || math.IsInf(v, 0) || (i > 0 && !(v > x[i-1])) {
			return false
		}
	}
	return true
}

func (sh *shared) newCell(hist bool) cell {
	var edges [][]float64
	if hist {
		edges = sh.edges
	}
	return cell{Balance: newBalance(len(sh.terms), edges), Effects: NewEffects(sh.effects)}
}

func (sh *shared) empty() *State {
	return &State{sh: sh, a: accum{
		Whole:   sh.newCell(true),
		Unseen:  map[string]int64{},
		Missing: map[string]int64{},
		Overlap: newOverlap(sh.model.Reference.PropensityEdges),
		Drift:   newDrift(sh.model.Reference.PropensityDeciles),
		seg:     map[string]*segment{},
	}}
}

// Empty returns a fresh State with the same configuration.
func (s *State) Empty() *State { return s.sh.empty() }

// Model is the model the State was made for.
func (s *State) Model() *fit.Model { return s.sh.model }

// Policy is the State's weighting policy.
func (s *State) Policy() score.Policy { return s.sh.policy }

// Add folds one scored batch in. rec is needed only for the By columns.
// Rows with a null treatment are counted and left out of everything else.
// Add keeps no reference to rec, b or sc. After an error the State may hold
// part of the batch: the run is to be abandoned.
func (s *State) Add(rec arrow.RecordBatch, b *fit.Batch, sc *score.Scores) error {
	sh := s.sh
	n := b.N
	x := sh.pool.Get().(*scratch)
	defer func() {
		clear(x.cols) // keep no reference to the batch's columns
		sh.pool.Put(x)
	}()
	if err := checkBatch(sh, b, sc, &x.bin); err != nil {
		return err
	}

	var segCols []arrow.Array
	if sh.seg != nil {
		var err error
		if segCols, err = sh.seg.columns(rec, x.cols); err != nil {
			return err
		}
		x.cols = segCols
		if rec.NumRows() != int64(n) {
			return fmt.Errorf("aggregate: record batch has %d rows, the encoded batch %d", rec.NumRows(), n)
		}
	}

	x.arm = growT(x.arm, n)
	x.w = grow(x.w, n)
	arm, w := x.arm, x.w
	a := &s.a
	for i := 0; i < n; i++ {
		t := b.T[i]
		if t < -1 || t > 1 {
			return &pipeline.Error{RowGroup: -1, Row: -1, Column: sh.model.Encoding.Treatment.Column,
				Err: fmt.Errorf("batch row %d: treatment code %d; want 1, 0 or -1 (null)", i, t)}
		}
		arm[i] = t
		wi := sc.W[i]
		if t >= 0 && !(sc.WValid[i] && wi >= 0 && wi <= maxMagnitude) {
			a.BadWeight++
			wi = 0
		}
		w[i] = wi
	}
	if b.Y != nil {
		for i := 0; i < n; i++ {
			if !b.YValid[i] {
				a.NullOutcome++
			}
		}
	}

	x.rows.split(arm)
	a.Whole.add(b, sc, &x.rows, arm, w, x.hist, &x.bin, &x.eff)
	a.Overlap.add(sc.E, &x.rows, w, x.hist)
	a.Drift.add(sc.E, &x.rows)
	a.Clipped += sc.Clipped
	a.Trimmed += sc.Trimmed
	a.Truncated += sc.Truncated
	for k, v := range b.Unseen {
		a.Unseen[k] += v
	}
	for k, v := range b.MissingImputed {
		a.Missing[k] += v
	}
	if sh.seg != nil {
		return s.addSegments(segCols, b, sc, x)
	}
	return nil
}

// maxMagnitude bounds term values and weights: their squares are summed,
// and a square above the largest float would turn every figure into NaN.
const maxMagnitude = 1.3407807929942596e154 // sqrt(math.MaxFloat64)

// checkBatch refuses a batch whose buffers do not match, or that carries a
// term that is not finite (naming the term and the batch row). It finds the
// batch's 0/1 terms into bt on the way: those are finite.
func checkBatch(sh *shared, b *fit.Batch, sc *score.Scores, bt *binaryTerms) error {
	n := b.N
	if sc.N != n {
		return fmt.Errorf("aggregate: scores have %d rows, the batch %d", sc.N, n)
	}
	if len(b.X) != len(sh.terms) {
		return fmt.Errorf("aggregate: batch has %d terms, the model %d besides the intercept", len(b.X), len(sh.terms))
	}
	if len(b.T) < n || len(sc.E) < n || len(sc.W) < n || len(sc.WValid) < n || len(sc.InSupport) < n {
		return errors.New("aggregate: batch or scores buffers are shorter than the batch")
	}
	if b.Y != nil && (len(b.Y) < n || len(b.YValid) < n) {
		return errors.New("aggregate: outcome buffers are shorter than the batch")
	}
	if (sc.Mu0 == nil) != (sc.Mu1 == nil) || (sc.Mu0 != nil && (len(sc.Mu0) < n || len(sc.Mu1) < n)) {
		return errors.New("aggregate: outcome predictions are missing or shorter than the batch")
	}
	for j, col := range b.X {
		if len(col) < n {
			return &pipeline.Error{RowGroup: -1, Row: -1, Column: sh.terms[j],
				Err: fmt.Errorf("aggregate: term has %d values for a batch of %d rows", len(col), n)}
		}
	}
	sh.findBinary(bt, b.X, n)
	for j, col := range b.X {
		if bt.is[j] {
			continue
		}
		var sum2 float64
		for _, v := range col[:n] {
			sum2 += v * v
		}
		if sum2 <= math.MaxFloat64 { // finite, and so is every square
			continue
		}
		for i, v := range col[:n] {
			if !(math.Abs(v) <= maxMagnitude) {
				return &pipeline.Error{RowGroup: -1, Row: -1, Column: sh.terms[j],
					Err: fmt.Errorf("batch row %d: term value %v is not finite or too large to square (|x| > %.3g)", i, v, maxMagnitude)}
			}
		}
	}
	return nil
}

// addSegments assigns each row to its segment, then feeds each segment its
// rows gathered into scratch buffers.
func (s *State) addSegments(cols []arrow.Array, b *fit.Batch, sc *score.Scores, x *scratch) error {
	sh := s.sh
	n := b.N
	if cap(x.rowSeg) < n {
		x.rowSeg = make([]int32, n)
		x.idx = make([]int32, n)
	}
	rowSeg, idx := x.rowSeg[:n], x.idx[:n]
	x.local = x.local[:0]
	x.count = x.count[:0]
	// local numbers the segments seen in this batch; the map is consulted
	// once per row, and a segment remembers its number for this batch.
	s.stamp++
	for i := 0; i < n; i++ {
		x.key = appendKey(x.key[:0], cols, i)
		g, ok := s.a.seg[string(x.key)]
		if !ok {
			if len(s.a.seg) >= sh.set.MaxSegments {
				return sh.seg.tooMany()
			}
			key := string(x.key)
			g = &segment{Values: decodeKey(key), cell: sh.newCell(false), key: key}
			s.a.seg[key] = g
		}
		if g.stamp != s.stamp {
			g.stamp, g.local = s.stamp, len(x.local)
			x.local = append(x.local, g)
			x.count = append(x.count, 0)
		}
		l := g.local
		rowSeg[i] = int32(l)
		x.count[l]++
	}
	// counting sort of the rows by local segment
	off := make([]int32, len(x.local)+1)
	for l, c := range x.count {
		off[l+1] = off[l] + c
	}
	pos := slices.Clone(off[:len(x.local)])
	for i, l := range rowSeg {
		idx[pos[l]] = int32(i)
		pos[l]++
	}
	for l, g := range x.local {
		gather(idx[off[l]:off[l+1]], b, sc, x.arm, x.w, &x.g)
		x.g.rows.split(x.g.arm)
		sh.findBinary(&x.bin, x.g.b.X, x.g.b.N)
		g.add(&x.g.b, &x.g.s, &x.g.rows, x.g.arm, x.g.w, x.hist, &x.bin, &x.eff)
	}
	return nil
}

// compatible explains why o cannot be merged into s, or returns nil.
func (s *State) compatible(o *State) error {
	if s.sh == o.sh {
		return nil
	}
	a, b := s.sh, o.sh
	switch {
	case a.model.Checksum != b.model.Checksum:
		return fmt.Errorf("cannot merge states of different models (%s and %s)", a.model.Checksum, b.model.Checksum)
	case a.policy != b.policy:
		return fmt.Errorf("cannot merge states with different weighting policies (%s and %s)", policyJSON(a.policy), policyJSON(b.policy))
	case !slices.Equal(a.set.By, b.set.By):
		return fmt.Errorf("cannot merge states segmented by different columns (--by %s and --by %s)", quoteList(a.set.By), quoteList(b.set.By))
	case a.set.MinSegmentRows != b.set.MinSegmentRows || a.set.MaxSegments != b.set.MaxSegments || a.set.Gate != b.set.Gate:
		return fmt.Errorf("cannot merge states with different settings (%s and %s)", settingsJSON(a.set), settingsJSON(b.set))
	case len(a.terms) != len(b.terms):
		return fmt.Errorf("cannot merge states with %d and %d terms", len(a.terms), len(b.terms))
	}
	return nil
}

func policyJSON(p score.Policy) string {
	j, _ := json.Marshal(p)
	return string(j)
}

func settingsJSON(s settings) string {
	j, _ := json.Marshal(s)
	return string(j)
}

// Merge folds o into s. It refuses a state of another model, policy,
// segmentation or gate; merging an empty state changes nothing. o is not
// changed and s keeps no reference to its accumulators.
func (s *State) Merge(o *State) error {
	if o == nil {
		return nil
	}
	if err := s.compatible(o); err != nil {
		return err
	}
	a, b := &s.a, &o.a
	fresh := 0
	for k := range b.seg {
		if _, ok := a.seg[k]; !ok {
			fresh++
		}
	}
	if len(a.seg)+fresh > s.sh.set.MaxSegments {
		return s.sh.seg.tooMany()
	}
	if err := a.Whole.merge(&b.Whole); err != nil {
		return err
	}
	a.NullOutcome += b.NullOutcome
	a.BadWeight += b.BadWeight
	a.Clipped += b.Clipped
	a.Trimmed += b.Trimmed
	a.Truncated += b.Truncated
	for k, v := range b.Unseen {
		a.Unseen[k] += v
	}
	for k, v := range b.Missing {
		a.Missing[k] += v
	}
	a.Overlap.merge(b.Overlap)
	a.Drift.merge(b.Drift)
	for k, g := range b.seg {
		if mine, ok := a.seg[k]; ok {
			if err := mine.merge(&g.cell); err != nil {
				return err
			}
			continue
		}
		c := &segment{Values: g.Values, cell: s.sh.newCell(false), key: k}
		if err := c.merge(&g.cell); err != nil {
			return err
		}
		a.seg[k] = c
	}
	for _, in := range o.Inputs {
		if !slices.Contains(s.Inputs, in) {
			s.Inputs = append(s.Inputs, in)
		}
	}
	s.RunSeconds += o.RunSeconds
	return nil
}

// sortedSegments lists the segments sorted by their values, column by
// column, null first.
func (s *State) sortedSegments() []*segment {
	list := make([]*segment, 0, len(s.a.seg))
	for _, g := range s.a.seg {
		list = append(list, g)
	}
	sort.Slice(list, func(i, j int) bool { return segmentLess(list[i].Values, list[j].Values) })
	return list
}

func segmentLess(a, b []*string) bool {
	for k := range a {
		x, y := a[k], b[k]
		switch {
		case x == nil && y == nil:
			continue
		case x == nil:
			return true
		case y == nil:
			return false
		case *x != *y:
			return *x < *y
		}
	}
	return false
}

// stateHeader is the state file around the accumulators.
type stateHeader struct {
	Format        string          `json:"format"`
	FormatVersion int             `json:"format_version"`
	ModelChecksum string          `json:"model_checksum"`
	Policy        score.Policy    `json:"policy"`
	Config        settings        `json:"config"`
	Terms         []string        `json:"terms"`
	Inputs        []string        `json:"inputs"`
	RunSeconds    float64         `json:"run_seconds"`
	Model         *fit.Model      `json:"model"`
	State         json.RawMessage `json:"state"`
}

// MarshalJSON writes the versioned state file: the format, the model
// (whole, so that merging and reporting need no model file), the policy and
// settings, and every accumulator. Floats are written by encoding/json in
// their shortest exact form, so a state reads back bit for bit.
func (s *State) MarshalJSON() ([]byte, error) {
	a := s.a
	a.Segments = s.sortedSegments()
	body, err := json.Marshal(&a)
	if err != nil {
		return nil, fmt.Errorf("aggregate: writing state: %w", err)
	}
	inputs := s.Inputs
	if inputs == nil {
		inputs = []string{}
	}
	return json.Marshal(stateHeader{
		Format: StateFormat, FormatVersion: StateVersion,
		ModelChecksum: s.sh.model.Checksum, Policy: s.sh.policy, Config: s.sh.set,
		Terms: s.sh.terms, Inputs: inputs, RunSeconds: s.RunSeconds,
		Model: s.sh.model, State: body,
	})
}

// UnmarshalState reads a state file's contents; name is used in errors.
func UnmarshalState(name string, data []byte) (*State, error) {
	var h stateHeader
	if err := json.Unmarshal(data, &h); err != nil {
		return nil, fmt.Errorf("%s: not a heft state file: %w", name, err)
	}
	if h.Format != StateFormat {
		return nil, fmt.Errorf("%s: format is %q, want %q", name, h.Format, StateFormat)
	}
	if h.FormatVersion < 1 || h.FormatVersion > StateVersion {
		return nil, fmt.Errorf("%s: state format_version %d; this heft reads versions up to %d", name, h.FormatVersion, StateVersion)
	}
	if h.Model == nil {
		return nil, fmt.Errorf("%s: state has no model", name)
	}
	if h.Model.Checksum != h.ModelChecksum {
		return nil, fmt.Errorf("%s: model_checksum %s does not match the embedded model's %s", name, h.ModelChecksum, h.Model.Checksum)
	}
	// The embedded model supplies the covariances of the second standard
	// error: an edit to it must not pass for the model it claims to be.
	if sum, err := h.Model.ComputeChecksum(); err != nil || sum != h.Model.Checksum {
		return nil, fmt.Errorf("%s: the embedded model was edited: its checksum is %s but its content hashes to %s", name, h.Model.Checksum, sum)
	}
	sh, err := newShared(h.Model, h.Policy, h.Config)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	if !slices.Equal(h.Terms, sh.terms) {
		return nil, fmt.Errorf("%s: state terms do not match its model's", name)
	}
	s := sh.empty()
	s.Inputs, s.RunSeconds = h.Inputs, h.RunSeconds
	if err := s.a.decode(sh, h.State); err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	return s, nil
}

// decode fills a fresh accum, whose structures already have the model's
// shape, from its JSON, then checks that the shapes survived.
func (a *accum) decode(sh *shared, data []byte) error {
	// Plain has accum's fields; the outer Segments, being less nested,
	// takes the segments, which need the model's shape before decoding.
	type Plain accum
	var body struct {
		*Plain
		Segments []json.RawMessage `json:"segments"`
	}
	body.Plain = (*Plain)(a)
	if err := json.Unmarshal(data, &body); err != nil {
		return fmt.Errorf("reading state: %w", err)
	}
	if a.Overlap == nil || a.Drift == nil {
		return errors.New("state is missing accumulators")
	}
	if err := a.Whole.check(sh); err != nil {
		return err
	}
	if err := a.Overlap.check(); err != nil {
		return err
	}
	if err := a.Drift.check(); err != nil {
		return err
	}
	if a.Unseen == nil {
		a.Unseen = map[string]int64{}
	}
	if a.Missing == nil {
		a.Missing = map[string]int64{}
	}
	for i, r := range body.Segments {
		g := &segment{cell: sh.newCell(false)}
		if err := json.Unmarshal(r, g); err != nil {
			return fmt.Errorf("reading segment %d: %w", i, err)
		}
		if err := g.check(sh); err != nil {
			return fmt.Errorf("segment %d: %w", i, err)
		}
		if len(g.Values) != len(sh.set.By) {
			return fmt.Errorf("segment %d has %d values for %d --by columns", i, len(g.Values), len(sh.set.By))
		}
		g.key = encodeKey(g.Values)
		if _, dup := a.seg[g.key]; dup {
			return fmt.Errorf("segment %d repeats the values %v", i, g.text())
		}
		a.seg[g.key] = g
	}
	if len(a.seg) > sh.set.MaxSegments {
		return sh.seg.tooMany()
	}
	a.Segments = nil
	return nil
}

// ReadState reads a state file written by WriteFile.
func ReadState(path string) (*State, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return UnmarshalState(path, data)
}

// WriteFile writes the state to path atomically: to a temporary file beside
// it, synced, then renamed over path, so a failure leaves no partial file.
func (s *State) WriteFile(path string) error {
	data, err := s.MarshalJSON()
	if err != nil {
		return err
	}
	return writeAtomic(path, append(data, '\n'))
}

// writeAtomic writes through pipeline's atomic file: either the whole state
// appears at path or nothing changes there; the mode is 0666 less the umask.
func writeAtomic(path string, data []byte) error {
	return pipeline.WriteFileAtomic(path, data)
}

func nan() float64 { return math.NaN() }
