package aggregate

import (
	"bytes"
	"testing"
)

// fuzzSeedState is a state over the first rows of the fixture, written out.
func fuzzSeedState(f *testing.F, estimand string, rows int) []byte {
	fx := loadFixture(f)
	s, err := New(fx.config(estimand), fixtureSchema)
	if err != nil {
		f.Fatal(err)
	}
	feed(f, s, []*part{fx.part(f, estimand, 0, rows)})
	b, err := s.MarshalJSON()
	if err != nil {
		f.Fatal(err)
	}
	return b
}

// Decoding any bytes as a state never panics; a state that decodes writes
// and reads back, merges into (or is refused by) a valid state, and makes a
// report.
func FuzzStateDecodeMerge(f *testing.F) {
	seed := fuzzSeedState(f, "ate", 60)
	f.Add(seed)
	f.Add(fuzzSeedState(f, "att", 20))
	f.Add(seed[:len(seed)/2])
	f.Add(bytes.Replace(seed, []byte(`"format_version":1`), []byte(`"format_version":9`), 1))
	f.Add([]byte(`{"format":"heft-state","format_version":1}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := UnmarshalState("fuzz.json", data)
		if err != nil {
			return
		}
		out, err := s.MarshalJSON()
		if err != nil {
			return // a state decoded from damaged numbers may refuse to write
		}
		if _, err := UnmarshalState("again.json", out); err != nil {
			t.Fatalf("a written state does not read back: %v", err)
		}
		base, err := UnmarshalState("seed.json", seed)
		if err != nil {
			t.Fatal(err)
		}
		if err := base.Merge(s); err == nil {
			base.Report()
		}
		s.Report()
	})
}
