package aggregate

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestBinGuess: the guessed-then-stepped bin equals histBin's binary
// search for even and uneven edges, values outside them, on edges, NaN
// and ±Inf.
func TestBinGuess(t *testing.T) {
	even := make([]float64, 51)
	for k := range even {
		even[k] = float64(k) / 50
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for _, edges := range [][]float64{even, {0, 0.001, 0.5, 0.51, 0.9, 1}, {-3, 2}, {0.2, 0.2000001, 0.7}} {
		g := newBinGuess(edges)
		xs := []float64{math.NaN(), math.Inf(1), math.Inf(-1), -1e300, 1e300}
		xs = append(xs, edges...)
		for range 10000 {
			xs = append(xs, edges[0]-0.1+rng.Float64()*(edges[len(edges)-1]-edges[0]+0.2))
		}
		for _, x := range xs {
			if got, want := g.bin(edges, x), histBin(edges, x); got != want {
				t.Errorf("edges %v, x %v: bin %d, want %d", edges[:min(len(edges), 6)], x, got, want)
			}
		}
	}
}
