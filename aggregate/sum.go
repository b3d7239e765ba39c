package aggregate

import "math"

// Sum is a running sum with Neumaier's compensation (Neumaier 1974,
// "Rundungsfehleranalyse einiger Verfahren zur Summation endlicher Summen",
// ZAMM 54): C collects the low-order bits that S loses, so the error stays
// of the order of one rounding however many terms are added. The zero value
// is an empty sum.
type Sum struct {
	S float64 `json:"s"`
	C float64 `json:"c"`
}

// Add adds x.
func (s *Sum) Add(x float64) {
	t := s.S + x
	if math.Abs(s.S) >= math.Abs(x) {
		s.C += (s.S - t) + x
	} else {
		s.C += (x - t) + s.S
	}
	s.S = t
}

// Merge adds the partial sum o: its S with compensation, its C (already
// small) directly, so that merging with an empty sum, on either side, gives
// the other sum bit for bit.
func (s *Sum) Merge(o Sum) {
	s.Add(o.S)
	s.C += o.C
}

// Value is the compensated total S + C.
func (s Sum) Value() float64 { return s.S + s.C }
