package stage

import (
	"encoding/json"
	"fmt"
	"slices"

	"github.com/heft-project/heft/aggregate"
)

// Acc is the combine's accumulator: heft's mergeable state of the rows
// scored so far, with the parts it holds, so that the last step can tell a
// complete job from one that lost a part.
type Acc struct {
	Parts []int // the indices of the parts merged in
	Rows  int64
	State *aggregate.State // nil when no accumulators run
}

// mergeFn is the CombineFn over the parts' states. Merging is exact and
// does not depend on order (aggregate.State.Merge: compensated sums,
// pairwise-merged moments, fixed histogram edges), so however the runner
// groups and orders the partial combines, the result is what heft merge
// gives for the same parts.
type mergeFn struct{}

func (mergeFn) CreateAccumulator() Acc { return Acc{} }

func (mergeFn) AddInput(a Acc, r Result) (Acc, error) {
	a.Parts = append(a.Parts, r.Index)
	a.Rows += r.Rows
	if len(r.State) == 0 {
		return a, nil
	}
	s, err := aggregate.UnmarshalState(fmt.Sprintf("the state of part %d", r.Index), r.State)
	if err != nil {
		return a, marked(err, ExitInternal)
	}
	return a, mergeInto(&a, s)
}

func (mergeFn) MergeAccumulators(a, b Acc) (Acc, error) {
	a.Parts = append(a.Parts, b.Parts...)
	a.Rows += b.Rows
	if b.State == nil {
		return a, nil
	}
	return a, mergeInto(&a, b.State)
}

func (mergeFn) ExtractOutput(a Acc) Acc {
	slices.Sort(a.Parts)
	return a
}

// mergeInto merges s into a's state. A merge can fail on the table's
// data (more segments than --max-segments once the parts' are put
// together), as heft score would: its error is heft score's.
func mergeInto(a *Acc, s *aggregate.State) error {
	if a.State == nil {
		a.State = s
		return nil
	}
	if err := a.State.Merge(s); err != nil {
		return marked(err, ExitInput)
	}
	return nil
}

// accWire is Acc as the runner moves it between workers: the state as its
// state file's JSON.
type accWire struct {
	Parts []int           `json:"parts"`
	Rows  int64           `json:"rows"`
	State json.RawMessage `json:"state,omitempty"`
}

func encodeAcc(a Acc) ([]byte, error) {
	w := accWire{Parts: a.Parts, Rows: a.Rows}
	if a.State != nil {
		b, err := a.State.MarshalJSON()
		if err != nil {
			return nil, err
		}
		w.State = b
	}
	return json.Marshal(w)
}

func decodeAcc(b []byte) (Acc, error) {
	var w accWire
	if err := json.Unmarshal(b, &w); err != nil {
		return Acc{}, fmt.Errorf("combine accumulator: %w", err)
	}
	a := Acc{Parts: w.Parts, Rows: w.Rows}
	if len(w.State) > 0 {
		s, err := aggregate.UnmarshalState("combine accumulator", w.State)
		if err != nil {
			return Acc{}, err
		}
		a.State = s
	}
	return a, nil
}
