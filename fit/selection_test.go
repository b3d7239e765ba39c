package fit

import (
	"math"
	"math/rand/v2"
	"slices"
	"sort"
	"testing"
)

// selectionInputs are shapes that trouble quickselect: ties, runs, sorted,
// reversed, organ-pipe, all equal, two values, and plain random.
func selectionInputs(rng *rand.Rand, n int) map[string][]float64 {
	in := map[string][]float64{}
	mk := func(name string, f func(i int) float64) {
		x := make([]float64, n)
		for i := range x {
			x[i] = f(i)
		}
		in[name] = x
	}
	mk("random", func(int) float64 { return rng.NormFloat64() })
	mk("ties", func(int) float64 { return float64(rng.IntN(7)) })
	mk("sorted", func(i int) float64 { return float64(i) })
	mk("reversed", func(i int) float64 { return float64(n - i) })
	mk("organ", func(i int) float64 { return float64(min(i, n-i)) })
	mk("equal", func(int) float64 { return 3.5 })
	mk("binary", func(int) float64 { return float64(rng.IntN(2)) })
	mk("heavy", func(int) float64 { return math.Exp(3 * rng.NormFloat64()) })
	return in
}

// TestSelectRanks checks every wanted rank against a full sort.
func TestSelectRanks(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, n := range []int{1, 2, 3, 17, 100, 1000, 4099} {
		for name, x := range selectionInputs(rng, n) {
			want := slices.Clone(x)
			slices.Sort(want)
			for _, ranks := range [][]int{
				ranksFor(n, decileQs[:]),
				{0}, {n - 1}, {0, n - 1}, {n / 2},
				ranksFor(n, []float64{0, 0.005, 0.01, 0.5, 0.999, 0.9999, 1}),
			} {
				got := slices.Clone(x)
				selectRanks(got, ranks)
				for _, r := range ranks {
					if got[r] != want[r] {
						t.Fatalf("%s n=%d rank %d: %v, sorted %v", name, n, r, got[r], want[r])
					}
				}
				g := slices.Clone(got)
				slices.Sort(g)
				if !slices.Equal(g, want) {
					t.Fatalf("%s n=%d: selection lost or duplicated values", name, n)
				}
			}
		}
	}
}

// TestSelectRanksDepthLimit forces the sorted fallback at once.
func TestSelectRanksDepthLimit(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	x := make([]float64, 500)
	for i := range x {
		x[i] = rng.Float64()
	}
	want := slices.Clone(x)
	slices.Sort(want)
	ranks := []int{3, 250, 499}
	selectIn(x, 0, ranks, 0)
	for _, r := range ranks {
		if x[r] != want[r] {
			t.Fatalf("rank %d: %v, sorted %v", r, x[r], want[r])
		}
	}
}

// TestQuantilesMatchSort compares the selection-based quantiles and
// deciles with definition 7 on a sorted copy, to the bit.
func TestQuantilesMatchSort(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	qs := []float64{0, 0.01, 0.05, 0.1, 0.25, 1.0 / 3, 0.5, 0.75, 0.95, 0.99, 0.999, 1}
	for _, n := range []int{1, 2, 5, 10, 11, 999, 3001} {
		for name, x := range selectionInputs(rng, n) {
			s := slices.Clone(x)
			slices.Sort(s)
			got := Quantiles(x, qs)
			for k, q := range qs {
				if w := quantileSorted(s, q); math.Float64bits(got[k].Value) != math.Float64bits(w) {
					t.Errorf("%s n=%d q=%v: %v, sorted %v", name, n, q, got[k].Value, w)
				}
			}
			var want []float64
			for k := 1; k <= 9; k++ {
				v := quantileSorted(s, float64(k)/10)
				if len(want) == 0 || v > want[len(want)-1] {
					want = append(want, v)
				}
			}
			if d := DecileEdges(x); !slices.Equal(d, want) {
				t.Errorf("%s n=%d deciles %v, sorted %v", name, n, d, want)
			}
			if ones, ok := binaryOnes(x); ok {
				if d := decilesBinary(n, ones); !slices.Equal(d, want) {
					t.Errorf("%s n=%d binary deciles %v, sorted %v", name, n, d, want)
				}
			}
		}
	}
}

func TestBinaryOnes(t *testing.T) {
	for _, c := range []struct {
		x    []float64
		ones int
		ok   bool
	}{
		{[]float64{0, 1, 1, 0}, 2, true},
		{[]float64{}, 0, true},
		{[]float64{0, 2}, 0, false},
		{[]float64{math.Copysign(0, -1), 1}, 0, false}, // −0 would sort beside +0 in any order
		{[]float64{0.5}, 0, false},
	} {
		ones, ok := binaryOnes(c.x)
		if ones != c.ones || ok != c.ok {
			t.Errorf("%v: %d, %v; want %d, %v", c.x, ones, ok, c.ones, c.ok)
		}
	}
}

// sortedAUC is the single-sort AUC this package used before sorting per
// arm: mid-ranks over the pooled sorted scores.
func sortedAUC(score []float64, t []int8) float64 {
	type pt struct {
		s float64
		t int8
	}
	var pts []pt
	for i, s := range score {
		if (t[i] == 0 || t[i] == 1) && !math.IsNaN(s) {
			pts = append(pts, pt{s, t[i]})
		}
	}
	sort.Slice(pts, func(a, b int) bool { return pts[a].s < pts[b].s })
	var n1, n0, rankSum float64
	for i := 0; i < len(pts); {
		j := i
		var k1 float64
		for j < len(pts) && pts[j].s == pts[i].s {
			if pts[j].t == 1 {
				k1++
			}
			j++
		}
		rankSum += k1 * float64(i+1+j) / 2
		n1 += k1
		n0 += float64(j-i) - k1
		i = j
	}
	if n1 == 0 || n0 == 0 {
		return math.NaN()
	}
	return (rankSum - n1*(n1+1)/2) / (n1 * n0)
}

// TestPerArmOrderStatistics compares what Fit now reads from the sorted
// arms (AUC, histogram, pooled deciles, decile counts) with the pooled
// computations, to the bit, on data with many ties.
func TestPerArmOrderStatistics(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for _, n := range []int{2, 3, 50, 2000} {
		for _, levels := range []int{2, 5, 50, 0} {
			e := make([]float64, n)
			tr := make([]int8, n)
			for i := range e {
				if levels > 0 {
					e[i] = float64(rng.IntN(levels)) / float64(levels) // ties, edges hit exactly
				} else {
					e[i] = rng.Float64()
				}
				if rng.IntN(3) == 0 || i == 0 {
					tr[i] = 1
				}
			}
			tr[n-1] = 0 // both arms present
			n1 := 0
			for _, v := range tr {
				n1 += int(v)
			}
			e1, e0 := sortArms(e, tr, n1)
			if a, w := aucSorted(e1, e0), sortedAUC(e, tr); math.Float64bits(a) != math.Float64bits(w) {
				t.Errorf("n=%d levels=%d AUC %v, pooled %v", n, levels, a, w)
			}
			if a, w := AUC(e, tr), sortedAUC(e, tr); math.Float64bits(a) != math.Float64bits(w) {
				t.Errorf("n=%d levels=%d AUC() %v, pooled %v", n, levels, a, w)
			}
			edges := make([]float64, 51)
			for k := range edges {
				edges[k] = float64(k) / 50
			}
			if h, w := histogramSorted(edges, e1, e0), Histogram(e, edges); !slices.Equal(h, w) {
				t.Errorf("n=%d levels=%d histogram %v, pooled %v", n, levels, h, w)
			}
			ref := reference(Design{N: n, Cols: [][]float64{e}}, []string{"(Intercept)", "e"}, e, e1, e0, tr)
			want := DecileEdges(e)
			if !slices.Equal(ref.PropensityDeciles, want) {
				t.Errorf("n=%d levels=%d deciles %v, pooled %v", n, levels, ref.PropensityDeciles, want)
			}
			if !slices.Equal(ref.Terms[0].Edges, want) {
				t.Errorf("n=%d levels=%d term deciles %v, pooled %v", n, levels, ref.Terms[0].Edges, want)
			}
			counts := make([]float64, len(want)+1)
			for _, v := range e {
				counts[sort.SearchFloat64s(want, v)]++
			}
			if !slices.Equal(ref.DecileCounts, counts) {
				t.Errorf("n=%d levels=%d decile counts %v, pooled %v", n, levels, ref.DecileCounts, counts)
			}
			for k, arm := range []int8{-1, 1, 0} {
				m, sd := meanSDOne(e, tr, arm)
				got := [3][2]float64{{ref.Terms[0].Mean, ref.Terms[0].SD}, {ref.Terms[0].MeanTreated, ref.Terms[0].SDTreated}, {ref.Terms[0].MeanControl, ref.Terms[0].SDControl}}[k]
				if got != [2]float64{m, sd} {
					t.Errorf("n=%d levels=%d arm %d mean, SD %v, separate passes %v, %v", n, levels, arm, got, m, sd)
				}
			}
		}
	}
}

// meanSDOne is one arm's mean and SD in its own two passes (arm < 0: all).
func meanSDOne(x []float64, t []int8, arm int8) (mean, sd float64) {
	var n, sum float64
	for i, v := range x {
		if arm < 0 || t[i] == arm {
			sum += v
			n++
		}
	}
	if n == 0 {
		return 0, 0
	}
	mean = sum / n
	var ss float64
	for i, v := range x {
		if arm < 0 || t[i] == arm {
			d := v - mean
			ss += d * d
		}
	}
	if n > 1 {
		sd = math.Sqrt(ss / (n - 1))
	}
	return mean, sd
}

// BenchmarkDecilesSelect is one 1M-row term's decile edges.
func BenchmarkDecilesSelect(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	x := make([]float64, 1_000_000)
	for i := range x {
		x[i] = rng.NormFloat64()
	}
	s := make([]float64, len(x))
	for b.Loop() {
		copy(s, x)
		decilesSelect(s)
	}
}

// TestMeanSD3 compares the branch-free arm sums with one arm at a time, to
// the bit: negative values and −0 (masked terms are then −0), an arm with
// one row or none, and infinite or huge values, which take the direct route.
func TestMeanSD3(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	negZero := math.Copysign(0, -1)
	cases := map[string]func(i int) float64{
		"normal":   func(int) float64 { return 1e3 * rng.NormFloat64() },
		"negzero":  func(i int) float64 { return [3]float64{negZero, -2.5, 0}[i%3] },
		"allneg0":  func(int) float64 { return negZero },
		"infinite": func(i int) float64 { return [4]float64{1, math.Inf(1), -3, 2}[i%4] },
		"huge":     func(i int) float64 { return [2]float64{1e308, -1e308}[i%2] * (1 + float64(i%5)) / 5 },
	}
	for name, f := range cases {
		for _, n := range []int{1, 2, 9, 500} {
			for _, arms := range []string{"mixed", "treated", "control", "one treated"} {
				x := make([]float64, n)
				tr := make([]int8, n)
				for i := range x {
					x[i] = f(i)
					switch arms {
					case "mixed":
						tr[i] = int8(rng.IntN(2))
					case "treated":
						tr[i] = 1
					case "one treated":
						if i == n/2 {
							tr[i] = 1
						}
					}
				}
				got := meanSD3(x, tr)
				for k, arm := range []int8{-1, 1, 0} {
					m, sd := meanSDOne(x, tr, arm)
					if math.Float64bits(got[k].mean) != math.Float64bits(m) || math.Float64bits(got[k].sd) != math.Float64bits(sd) {
						t.Errorf("%s n=%d %s arm %d: %v, %v; one arm at a time %v, %v", name, n, arms, arm, got[k].mean, got[k].sd, m, sd)
					}
				}
			}
		}
	}
}

// TestSortedArms compares the radix-sorted arms with a comparison sort, to
// the bit, on propensity-like values: ties, exact 0 and 1, subnormals and
// values next to 1; and checks the refusals.
func TestSortedArms(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	gen := []func() float64{
		rng.Float64,
		func() float64 { return float64(rng.IntN(5)) / 4 },
		func() float64 {
			return [5]float64{0, 1, 5e-324, math.Nextafter(1, 0), 1 / (1 + math.Exp(-30*rng.NormFloat64()))}[rng.IntN(5)]
		},
	}
	for g, f := range gen {
		for _, n := range []int{0, 1, 2, 3, 100, 5000} {
			e := make([]float64, n)
			tr := make([]int8, n)
			var w1, w0 []float64
			for i := range e {
				e[i] = f()
				tr[i] = int8(rng.IntN(3)) - 1
				switch tr[i] {
				case 1:
					w1 = append(w1, e[i])
				case 0:
					w0 = append(w0, e[i])
				}
			}
			slices.Sort(w1)
			slices.Sort(w0)
			e1, e0, ok := SortedArms(e, tr)
			if !ok || !bitsEqual(e1, w1) || !bitsEqual(e0, w0) {
				t.Errorf("generator %d n=%d: ok %v, arms differ from a comparison sort", g, n, ok)
			}
		}
	}
	for _, bad := range []float64{math.NaN(), math.Copysign(0, -1), -0.1, 1.5, math.Inf(1)} {
		if _, _, ok := SortedArms([]float64{0.5, bad}, []int8{1, 0}); ok {
			t.Errorf("%v accepted", bad)
		}
		if _, _, ok := SortedArms([]float64{0.5, bad}, []int8{1, -1}); !ok {
			t.Errorf("%v refused on a row outside both arms", bad)
		}
	}
}

func bitsEqual(a, b []float64) bool {
	return slices.EqualFunc(a, b, func(x, y float64) bool { return math.Float64bits(x) == math.Float64bits(y) })
}
