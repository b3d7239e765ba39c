package aggregate

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"
)

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

// MarshalJSON writes {"s": S, "c": C}. Numbers are in their shortest exact
// form; a non-finite one (from overflowing input) is written as the string
// "NaN", "+Inf" or "-Inf", so a state always writes and reads back as it was.
func (s Sum) MarshalJSON() ([]byte, error) {
	b := make([]byte, 0, 56)
	b = append(b, `{"s":`...)
	b = appendNumber(b, s.S)
	b = append(b, `,"c":`...)
	b = appendNumber(b, s.C)
	return append(b, '}'), nil
}

// UnmarshalJSON reads what MarshalJSON writes.
func (s *Sum) UnmarshalJSON(data []byte) error {
	var raw struct {
		S json.RawMessage `json:"s"`
		C json.RawMessage `json:"c"`
	}
	if err := json.Unmarshal(data, &raw); err != nil {
		return err
	}
	var err error
	if s.S, err = parseNumber(raw.S); err != nil {
		return err
	}
	s.C, err = parseNumber(raw.C)
	return err
}

func appendNumber(b []byte, f float64) []byte {
	switch {
	case math.IsNaN(f):
		return append(b, `"NaN"`...)
	case math.IsInf(f, 1):
		return append(b, `"+Inf"`...)
	case math.IsInf(f, -1):
		return append(b, `"-Inf"`...)
	}
	return strconv.AppendFloat(b, f, 'g', -1, 64)
}

func parseNumber(raw json.RawMessage) (float64, error) {
	if len(raw) == 0 {
		return 0, nil
	}
	switch string(raw) {
	case `"NaN"`:
		return math.NaN(), nil
	case `"+Inf"`:
		return math.Inf(1), nil
	case `"-Inf"`:
		return math.Inf(-1), nil
	}
	f, err := strconv.ParseFloat(string(raw), 64)
	if err != nil {
		return 0, fmt.Errorf("not a number: %s", raw)
	}
	return f, nil
}
