// Package scenario writes heft's built-in demo data: an invented regional
// utility that offered households a free home energy audit. Everything here is
// made up for the demo; it is not data about anyone.
//
// The generator knows the truth. Treatment (audit taken) follows a logistic
// model in the covariates as they appear in the table, so a main-effects
// propensity model is correctly specified; the outcome (next-winter gas use,
// kWh) is linear in the covariates within each arm, with a saving that grows
// with prior gas use and dwelling age, so the effect is heterogeneous and the
// ATT (audits go to heavy users) differs from the ATE. Per-row true effects
// are averaged to give the sample ATE, ATT, ATC and overlap-weighted effect.
package scenario

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// Column names of the demo table.
const (
	ColID        = "household_id"
	ColAge       = "dwelling_age"
	ColArea      = "floor_area"
	ColOccupants = "occupants"
	ColPriorGas  = "prior_gas_kwh"
	ColHeating   = "heating"
	ColDistrict  = "district"
	ColTariff    = "flex_tariff"
	ColTreatment = "audit"
	ColOutcome   = "next_gas_kwh"
)

// Covariates lists the demo's covariates in model order.
var Covariates = []string{ColAge, ColArea, ColOccupants, ColPriorGas, ColHeating, ColDistrict, ColTariff}

var (
	heatingLevels = []string{"gas_boiler", "heat_pump", "district_heat", "oil_boiler", "electric"}
	heatingShare  = []float64{0.55, 0.12, 0.15, 0.13, 0.05}
	// heat pumps almost never get an audit, so e is near 0 there: a positivity problem on purpose.
	heatingCoef   = []float64{0, -2.7, -0.4, 0.5, -0.8}
	districtNames = []string{"Alder Vale", "Brookmere", "Cinder Hill", "Dunmore Flats", "Elm Crossing", "Fernbank", "Greywater", "Harrow End"}
	districtShare = []float64{0.18, 0.16, 0.14, 0.12, 0.12, 0.10, 0.10, 0.08}
	// the outreach team was based in Greywater: audits are near certain there for heavy users.
	districtCoef = []float64{0, 0.3, -0.2, 0.4, -0.5, 0.1, 3.6, -0.3}
)

// Truth is what the generator knows and writes beside the data.
type Truth struct {
	Rows       int64   `json:"rows"`
	Seed       uint64  `json:"seed"`
	Treated    int64   `json:"treated"`
	ATE        float64 `json:"ate"`     // sample mean of the row-level effects
	ATT        float64 `json:"att"`     // mean over treated rows
	ATC        float64 `json:"atc"`     // mean over control rows
	Overlap    float64 `json:"overlap"` // Σ e(1−e)τ / Σ e(1−e), with the true e
	Unit       string  `json:"unit"`    // the outcome's unit
	ShareBelow float64 `json:"share_e_below_0_01"`
	ShareAbove float64 `json:"share_e_above_0_99"`
	Note       string  `json:"note"`
}

// Options control the generator.
type Options struct {
	Rows         int64
	Seed         uint64
	RowGroupRows int64 // 0 = 131072
	Files        int   // split into this many files (partitions); 0 or 1 = one file
	Alloc        memory.Allocator
}

// Schema is the demo table's Arrow schema.
func Schema() *arrow.Schema {
	return arrow.NewSchema([]arrow.Field{
		{Name: ColID, Type: arrow.PrimitiveTypes.Int64},
		{Name: ColAge, Type: arrow.PrimitiveTypes.Float64},
		{Name: ColArea, Type: arrow.PrimitiveTypes.Float64},
		{Name: ColOccupants, Type: arrow.PrimitiveTypes.Int32},
		{Name: ColPriorGas, Type: arrow.PrimitiveTypes.Float64},
		{Name: ColHeating, Type: arrow.BinaryTypes.String},
		{Name: ColDistrict, Type: arrow.BinaryTypes.String},
		{Name: ColTariff, Type: arrow.FixedWidthTypes.Boolean},
		{Name: ColTreatment, Type: arrow.PrimitiveTypes.Int8},
		{Name: ColOutcome, Type: arrow.PrimitiveTypes.Float64},
	}, nil)
}

// row is one generated household.
type row struct {
	age, area, prior, y, e, tau float64
	occ                         int32
	heat, dist                  int
	tariff                      bool
	t                           int8
}

func pick(r *rand.Rand, share []float64) int {
	u := r.Float64()
	for i, s := range share {
		if u < s {
			return i
		}
		u -= s
	}
	return len(share) - 1
}

// draw generates one household from r.
func draw(r *rand.Rand) row {
	var h row
	// Values are rounded as they are written, before they drive anything, so
	// the models in the truth are exactly the models of the table's columns.
	h.age = math.Round(math.Min(130, 30*r.ExpFloat64()+5*r.Float64())*10) / 10 // years, right-skewed
	h.area = math.Round(math.Max(25, 110+35*r.NormFloat64())*10) / 10          // m²
	h.occ = int32(1 + min(6, int(math.Floor(r.ExpFloat64()*1.6))))
	h.heat = pick(r, heatingShare)
	h.dist = pick(r, districtShare)
	h.tariff = r.Float64() < 0.3
	// prior-winter gas use, kWh
	h.prior = math.Round(math.Max(500, 4000+60*h.area+25*h.age+700*float64(h.occ)-3000*b2f(h.heat == 1)+2500*r.NormFloat64()))
	lp := -1.1 + 0.012*(h.age-30) + 0.004*(h.area-110) + 0.10*(float64(h.occ)-2.5) +
		0.00022*(h.prior-13000) + heatingCoef[h.heat] + districtCoef[h.dist] + 0.45*b2f(h.tariff)
	h.e = 1 / (1 + math.Exp(-lp))
	if r.Float64() < h.e {
		h.t = 1
	}
	// row-level effect of an audit on next-winter gas use (kWh saved is negative)
	h.tau = -(900 + 0.05*(h.prior-13000) + 6*(h.age-30))
	y0 := 800 + 0.92*h.prior - 150*b2f(h.tariff) + 3*h.age + 120*float64(h.dist%3) + 900*r.NormFloat64()
	h.y = y0 + float64(h.t)*h.tau
	return h
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// Write generates the table into dir (demo.parquet, or part-00000.parquet…
// when Files > 1) and truth.json, streaming batch by batch: memory does not
// grow with Rows. It returns the truth and the data file paths.
func Write(ctx context.Context, dir string, opt Options) (*Truth, []string, error) {
	if opt.Rows <= 0 {
		return nil, nil, fmt.Errorf("demo: --rows must be positive, got %d", opt.Rows)
	}
	if opt.Alloc == nil {
		opt.Alloc = memory.DefaultAllocator
	}
	if opt.RowGroupRows <= 0 {
		opt.RowGroupRows = 131072
	}
	files := max(1, opt.Files)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, nil, err
	}
	r := rand.New(rand.NewPCG(opt.Seed, 0x6865667464656d6f))
	schema := Schema()
	var (
		tr                      = Truth{Rows: opt.Rows, Seed: opt.Seed, Unit: "kWh of gas next winter"}
		sumTau, sumTauT, sumOvl float64
		sumOvlW                 float64
		below, above            int64
		paths                   []string
		id                      int64
	)
	const batch = 65536
	for f := 0; f < files; f++ {
		name := "demo.parquet"
		if files > 1 {
			name = fmt.Sprintf("part-%05d.parquet", f)
		}
		path := filepath.Join(dir, name)
		rows := opt.Rows / int64(files)
		if f == files-1 {
			rows = opt.Rows - rows*int64(files-1)
		}
		sink, err := pipeline.NewParquetSink(path, schema, pipeline.ParquetSinkOptions{
			RowGroupRows: opt.RowGroupRows, CreatedBy: "heft demo", Alloc: opt.Alloc,
			Metadata: arrow.NewMetadata([]string{"heft.demo"}, []string{"household energy audit (invented)"}),
		})
		if err != nil {
			return nil, nil, err
		}
		b := array.NewRecordBuilder(opt.Alloc, schema)
		for done := int64(0); done < rows; {
			if err := ctx.Err(); err != nil {
				b.Release()
				sink.Abort()
				return nil, nil, err
			}
			n := min(int64(batch), rows-done)
			for i := int64(0); i < n; i++ {
				h := draw(r)
				b.Field(0).(*array.Int64Builder).Append(id)
				b.Field(1).(*array.Float64Builder).Append(h.age)
				b.Field(2).(*array.Float64Builder).Append(h.area)
				b.Field(3).(*array.Int32Builder).Append(h.occ)
				b.Field(4).(*array.Float64Builder).Append(h.prior)
				b.Field(5).(*array.StringBuilder).Append(heatingLevels[h.heat])
				b.Field(6).(*array.StringBuilder).Append(districtNames[h.dist])
				b.Field(7).(*array.BooleanBuilder).Append(h.tariff)
				b.Field(8).(*array.Int8Builder).Append(h.t)
				b.Field(9).(*array.Float64Builder).Append(h.y)
				id++
				sumTau += h.tau
				if h.t == 1 {
					tr.Treated++
					sumTauT += h.tau
				}
				ow := h.e * (1 - h.e)
				sumOvl += ow * h.tau
				sumOvlW += ow
				if h.e < 0.01 {
					below++
				} else if h.e > 0.99 {
					above++
				}
			}
			rec := b.NewRecordBatch()
			err := sink.Write(ctx, rec)
			rec.Release()
			if err != nil {
				b.Release()
				sink.Abort()
				return nil, nil, err
			}
			done += n
		}
		b.Release()
		if err := sink.Close(); err != nil {
			sink.Abort()
			return nil, nil, err
		}
		paths = append(paths, path)
	}
	n := float64(opt.Rows)
	tr.ATE = sumTau / n
	if tr.Treated > 0 {
		tr.ATT = sumTauT / float64(tr.Treated)
	}
	if c := opt.Rows - tr.Treated; c > 0 {
		tr.ATC = (sumTau - sumTauT) / float64(c)
	}
	tr.Overlap = sumOvl / sumOvlW
	tr.ShareBelow = float64(below) / n
	tr.ShareAbove = float64(above) / n
	tr.Note = "Sample averages of the generator's row-level effects on invented data; e is the generator's true propensity."
	tb, _ := json.MarshalIndent(tr, "", "  ")
	if err := os.WriteFile(filepath.Join(dir, "truth.json"), append(tb, '\n'), 0o644); err != nil {
		return nil, nil, err
	}
	return &tr, paths, nil
}
