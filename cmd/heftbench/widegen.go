package main

import (
	"context"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// The wide table is an invented utility's customer-month billing table: one
// row per customer and month, 101 columns. Twenty of them are the
// propensity model's covariates (wideModelColumns) and one is the treatment,
// thermostat_offer (the customer accepted a smart-thermostat offer), drawn
// from a logistic model of those twenty; the other 80 are what such a table
// also carries and a model never reads (ids, timestamps, daily readings,
// billing amounts, codes). The point is the shape: a scorer that has to
// decode and re-encode all 101 columns to append three does five times the
// work of one that decodes 21 and copies the rest.

// wideTreatment is the treatment column of the wide table.
const wideTreatment = "thermostat_offer"

// wideModelColumns are the covariates of the wide table's propensity model,
// in file order.
var wideModelColumns = []string{
	"region", "tariff", "dwelling_type", "heating_fuel",
	"floor_area_m2", "occupants", "home_age_years",
	"prior_kwh_m1", "prior_kwh_m2", "prior_kwh_m3",
	"peak_share", "avg_temp_c", "bill_prev", "tenure_years", "solar_kw",
	"income_index", "appliance_index",
	"outages_12m", "service_calls_12m", "autopay_months",
}

var (
	wideRegions   = []string{"north", "south", "east", "west", "central", "coast", "valley", "highland"}
	wideTariffs   = []string{"standard", "time_of_use", "fixed_green", "prepay", "ev_night"}
	wideDwellings = []string{"detached", "semi", "terrace", "flat"}
	wideFuels     = []string{"gas", "electric", "heat_pump", "oil"}

	// Effects on the log-odds of the treatment by level, the first level
	// the reference.
	wideRegionEff   = []float64{0, 0.20, -0.15, 0.10, 0.30, -0.25, 0.05, -0.40}
	wideTariffEff   = []float64{0, 0.45, 0.30, -0.60, 0.25}
	wideDwellingEff = []float64{0, -0.10, -0.20, -0.50}
	wideFuelEff     = []float64{0, 0.35, 0.55, -0.30}
)

// wideModel holds one batch of the model columns, drawn row by row (some
// depend on others) before any column is appended.
type wideModel struct {
	region, tariff, dwelling, fuel         []int
	floorArea, kwh1, kwh2, kwh3, peakShare []float64
	temp, billPrev, tenure, solar          []float64
	income, appliance                      []float64
	occupants, homeAge, outages, calls     []int32
	autopay                                []int32
	treat                                  []int8
}

func (m *wideModel) resize(n int) {
	grow := func(s []float64) []float64 { return append(s[:0], make([]float64, n)...) }
	growI := func(s []int) []int { return append(s[:0], make([]int, n)...) }
	grow32 := func(s []int32) []int32 { return append(s[:0], make([]int32, n)...) }
	m.region, m.tariff, m.dwelling, m.fuel = growI(m.region), growI(m.tariff), growI(m.dwelling), growI(m.fuel)
	m.floorArea, m.kwh1, m.kwh2, m.kwh3 = grow(m.floorArea), grow(m.kwh1), grow(m.kwh2), grow(m.kwh3)
	m.peakShare, m.temp, m.billPrev, m.tenure = grow(m.peakShare), grow(m.temp), grow(m.billPrev), grow(m.tenure)
	m.solar, m.income, m.appliance = grow(m.solar), grow(m.income), grow(m.appliance)
	m.occupants, m.homeAge, m.outages = grow32(m.occupants), grow32(m.homeAge), grow32(m.outages)
	m.calls, m.autopay = grow32(m.calls), grow32(m.autopay)
	m.treat = append(m.treat[:0], make([]int8, n)...)
}

// draw fills n rows. The treatment is Bernoulli with probability
// 1/(1+exp(-η)), η linear in the standardized covariates and the level
// effects above (the logistic model, Cox 1958, "The regression analysis of
// binary sequences", JRSS B 20(2)).
func (m *wideModel) draw(rng *rand.Rand, n int) {
	m.resize(n)
	for i := range n {
		m.region[i] = pick(rng, []float64{18, 14, 12, 12, 16, 10, 10, 8})
		m.tariff[i] = pick(rng, []float64{50, 20, 12, 10, 8})
		m.dwelling[i] = pick(rng, []float64{25, 25, 25, 25})
		m.fuel[i] = pick(rng, []float64{55, 25, 12, 8})
		area := math.Exp(4.45 + 0.35*rng.NormFloat64())
		occ := int32(1 + pick(rng, []float64{28, 34, 16, 14, 6, 2}))
		age := int32(rng.IntN(121))
		base := 1.6*area + 260*float64(occ)
		if m.fuel[i] == 1 || m.fuel[i] == 2 {
			base *= 1.6
		}
		m.floorArea[i] = round(area, 0.1)
		m.occupants[i] = occ
		m.homeAge[i] = age
		m.kwh1[i] = round(base*math.Exp(0.25*rng.NormFloat64()), 0.1)
		m.kwh2[i] = round(base*math.Exp(0.25*rng.NormFloat64()), 0.1)
		m.kwh3[i] = round(base*math.Exp(0.25*rng.NormFloat64()), 0.1)
		m.peakShare[i] = round(0.2+0.4*rng.Float64(), 0.001)
		m.temp[i] = round(10+6*rng.NormFloat64(), 0.1)
		m.billPrev[i] = round(12+0.28*m.kwh1[i]+4*rng.NormFloat64(), 0.01)
		m.tenure[i] = round(rng.ExpFloat64()*7, 0.01)
		if rng.IntN(100) < 15 {
			m.solar[i] = round(2+6*rng.Float64(), 0.1)
		}
		m.income[i] = round(100+20*rng.NormFloat64(), 0.1)
		m.appliance[i] = rng.NormFloat64()
		m.outages[i] = int32(pick(rng, []float64{60, 22, 10, 5, 2, 1}))
		m.calls[i] = int32(pick(rng, []float64{70, 18, 7, 3, 2}))
		m.autopay[i] = int32(rng.IntN(61))

		eta := -0.9 +
			wideRegionEff[m.region[i]] + wideTariffEff[m.tariff[i]] +
			wideDwellingEff[m.dwelling[i]] + wideFuelEff[m.fuel[i]] +
			0.30*(math.Log(area)-4.45)/0.35 +
			0.15*(float64(occ)-2.4) -
			0.004*(float64(age)-60) +
			0.35*(m.kwh1[i]-m.kwh3[i])/base +
			0.0003*(m.kwh1[i]-1400) +
			1.5*(m.peakShare[i]-0.4) -
			0.03*(m.temp[i]-10) +
			0.25*(m.income[i]-100)/20 -
			0.04*m.tenure[i] +
			0.08*m.solar[i] +
			0.20*m.appliance[i] +
			0.10*float64(m.outages[i]) -
			0.15*float64(m.calls[i]) +
			0.01*float64(m.autopay[i]-30)
		if rng.Float64() < 1/(1+math.Exp(-eta)) {
			m.treat[i] = 1
		}
	}
}

// pick draws an index with probability proportional to w.
func pick(rng *rand.Rand, w []float64) int {
	var sum float64
	for _, x := range w {
		sum += x
	}
	u := rng.Float64() * sum
	for i, x := range w {
		if u < x {
			return i
		}
		u -= x
	}
	return len(w) - 1
}

func round(x, step float64) float64 { return math.Round(x/step) * step }

// wideCol is one column of the wide table: its field and how to fill a
// batch's worth of it. Model columns copy from the batch's wideModel; the
// others draw from their own generator, so every column is a function of
// the seed alone.
type wideCol struct {
	field arrow.Field
	fill  func(b array.Builder, rng *rand.Rand, m *wideModel, row0 int64, n int)
}

var wideTimestamp = &arrow.TimestampType{Unit: arrow.Microsecond, TimeZone: "UTC"}

// 2024-01-01T00:00:00Z in microseconds.
const wideEpoch = int64(1704067200) * 1_000_000

const usPerDay = int64(86400) * 1_000_000

func nullable(name string, t arrow.DataType, fill func(b array.Builder, rng *rand.Rand, m *wideModel, row0 int64, n int)) wideCol {
	return wideCol{arrow.Field{Name: name, Type: t, Nullable: true}, fill}
}

func required(name string, t arrow.DataType, fill func(b array.Builder, rng *rand.Rand, m *wideModel, row0 int64, n int)) wideCol {
	return wideCol{arrow.Field{Name: name, Type: t}, fill}
}

// nullPct says whether a value is null, pct percent of the time.
func nullPct(rng *rand.Rand, pct int) bool { return pct > 0 && rng.IntN(100) < pct }

func catCol(name string, levels []string, w []float64, pct int) wideCol {
	return nullable(name, arrow.BinaryTypes.String, func(b array.Builder, rng *rand.Rand, _ *wideModel, _ int64, n int) {
		sb := b.(*array.StringBuilder)
		for range n {
			if nullPct(rng, pct) {
				sb.AppendNull()
				continue
			}
			if w == nil {
				sb.Append(levels[rng.IntN(len(levels))])
			} else {
				sb.Append(levels[pick(rng, w)])
			}
		}
	})
}

// idCol writes high-cardinality strings: prefix and a random number in
// [0, card) written in base (10 or 16), zero-padded to width.
func idCol(name, prefix string, card uint64, base, width, pct int) wideCol {
	return nullable(name, arrow.BinaryTypes.String, func(b array.Builder, rng *rand.Rand, _ *wideModel, _ int64, n int) {
		sb := b.(*array.StringBuilder)
		sb.ReserveData(n * (len(prefix) + width))
		buf := make([]byte, 0, 32)
		for range n {
			if nullPct(rng, pct) {
				sb.AppendNull()
				continue
			}
			buf = padded(append(buf[:0], prefix...), rng.Uint64N(card), base, width)
			sb.BinaryBuilder.Append(buf)
		}
	})
}

func padded(buf []byte, v uint64, base, width int) []byte {
	var digits [20]byte
	d := strconv.AppendUint(digits[:0], v, base)
	for range width - len(d) {
		buf = append(buf, '0')
	}
	return append(buf, d...)
}

func floatCol(name string, mean, sd, step float64, pct int) wideCol {
	return nullable(name, arrow.PrimitiveTypes.Float64, func(b array.Builder, rng *rand.Rand, _ *wideModel, _ int64, n int) {
		fb := b.(*array.Float64Builder)
		for range n {
			if nullPct(rng, pct) {
				fb.AppendNull()
				continue
			}
			v := mean + sd*rng.NormFloat64()
			if step > 0 {
				v = round(v, step)
			}
			fb.Append(v)
		}
	})
}

// dailyCol is one day's metered kWh, following the customer's usage in
// the month before (prior_kwh_m1 / 30), so the daily columns correlate
// with the model's.
func dailyCol(day int, pct int) wideCol {
	return nullable(fmt.Sprintf("daily_kwh_%02d", day), arrow.PrimitiveTypes.Float64, func(b array.Builder, rng *rand.Rand, m *wideModel, _ int64, n int) {
		fb := b.(*array.Float64Builder)
		for i := range n {
			if nullPct(rng, pct) {
				fb.AppendNull()
				continue
			}
			fb.Append(round(m.kwh1[i]/30*math.Exp(0.3*rng.NormFloat64()), 0.1))
		}
	})
}

func intCol(name string, lo, hi int64, pct int) wideCol {
	return nullable(name, arrow.PrimitiveTypes.Int64, func(b array.Builder, rng *rand.Rand, _ *wideModel, _ int64, n int) {
		ib := b.(*array.Int64Builder)
		for range n {
			if nullPct(rng, pct) {
				ib.AppendNull()
				continue
			}
			ib.Append(lo + rng.Int64N(hi-lo+1))
		}
	})
}

// timeCol writes timestamps uniform over [from, from+days) days after the
// epoch, to the second.
func timeCol(name string, from, days int64, pct int) wideCol {
	return nullable(name, wideTimestamp, func(b array.Builder, rng *rand.Rand, _ *wideModel, _ int64, n int) {
		tb := b.(*array.TimestampBuilder)
		for range n {
			if nullPct(rng, pct) {
				tb.AppendNull()
				continue
			}
			us := wideEpoch + from*usPerDay + rng.Int64N(days*86400)*1_000_000
			tb.Append(arrow.Timestamp(us))
		}
	})
}

func modelFloat(name string, get func(m *wideModel) []float64) wideCol {
	return required(name, arrow.PrimitiveTypes.Float64, func(b array.Builder, _ *rand.Rand, m *wideModel, _ int64, n int) {
		b.(*array.Float64Builder).AppendValues(get(m)[:n], nil)
	})
}

func modelInt32(name string, get func(m *wideModel) []int32) wideCol {
	return required(name, arrow.PrimitiveTypes.Int32, func(b array.Builder, _ *rand.Rand, m *wideModel, _ int64, n int) {
		b.(*array.Int32Builder).AppendValues(get(m)[:n], nil)
	})
}

func modelCat(name string, levels []string, get func(m *wideModel) []int) wideCol {
	return required(name, arrow.BinaryTypes.String, func(b array.Builder, _ *rand.Rand, m *wideModel, _ int64, n int) {
		sb := b.(*array.StringBuilder)
		for _, k := range get(m)[:n] {
			sb.Append(levels[k])
		}
	})
}

// wideColumns lists the wide table's 101 columns in file order: keys and
// dates first, the model's columns and the treatment in the middle, then
// readings, amounts and codes, as an export from a billing system might
// lay them out.
func wideColumns() []wideCol {
	cols := []wideCol{
		required("account_id", arrow.PrimitiveTypes.Int64, func(b array.Builder, _ *rand.Rand, _ *wideModel, row0 int64, n int) {
			ib := b.(*array.Int64Builder)
			for i := range int64(n) {
				ib.Append(10_000_000 + row0 + i)
			}
		}),
		intCol("premise_id", 1, 3_000_000, 0),
		idCol("customer_ref", "CR-", 1_000_000_000, 10, 9, 0),
		idCol("meter_serial", "MTR", 1<<32, 16, 8, 0),
		required("invoice_no", arrow.BinaryTypes.String, func(b array.Builder, _ *rand.Rand, _ *wideModel, row0 int64, n int) {
			sb := b.(*array.StringBuilder)
			buf := make([]byte, 0, 32)
			for i := range int64(n) {
				buf = padded(append(buf[:0], "INV-"...), uint64(row0+i), 10, 10)
				sb.BinaryBuilder.Append(buf)
			}
		}),
		idCol("postal_code", "P", 4000, 10, 4, 0),
		timeCol("period_start", 0, 366, 0),
		timeCol("period_end", 30, 366, 0),
		timeCol("bill_issued_at", 32, 366, 0),
		timeCol("due_at", 52, 366, 0),
		timeCol("last_payment_at", -30, 396, 10),
		timeCol("last_contact_at", -365, 730, 10),
		timeCol("connected_at", -24*365, 24*365, 0),

		modelCat("region", wideRegions, func(m *wideModel) []int { return m.region }),
		modelCat("tariff", wideTariffs, func(m *wideModel) []int { return m.tariff }),
		modelCat("dwelling_type", wideDwellings, func(m *wideModel) []int { return m.dwelling }),
		modelCat("heating_fuel", wideFuels, func(m *wideModel) []int { return m.fuel }),
		modelFloat("floor_area_m2", func(m *wideModel) []float64 { return m.floorArea }),
		modelInt32("occupants", func(m *wideModel) []int32 { return m.occupants }),
		modelInt32("home_age_years", func(m *wideModel) []int32 { return m.homeAge }),
		modelFloat("prior_kwh_m1", func(m *wideModel) []float64 { return m.kwh1 }),
		modelFloat("prior_kwh_m2", func(m *wideModel) []float64 { return m.kwh2 }),
		modelFloat("prior_kwh_m3", func(m *wideModel) []float64 { return m.kwh3 }),
		modelFloat("peak_share", func(m *wideModel) []float64 { return m.peakShare }),
		modelFloat("avg_temp_c", func(m *wideModel) []float64 { return m.temp }),
		modelFloat("bill_prev", func(m *wideModel) []float64 { return m.billPrev }),
		modelFloat("tenure_years", func(m *wideModel) []float64 { return m.tenure }),
		modelFloat("solar_kw", func(m *wideModel) []float64 { return m.solar }),
		modelFloat("income_index", func(m *wideModel) []float64 { return m.income }),
		modelFloat("appliance_index", func(m *wideModel) []float64 { return m.appliance }),
		modelInt32("outages_12m", func(m *wideModel) []int32 { return m.outages }),
		modelInt32("service_calls_12m", func(m *wideModel) []int32 { return m.calls }),
		modelInt32("autopay_months", func(m *wideModel) []int32 { return m.autopay }),
		required(wideTreatment, arrow.PrimitiveTypes.Int8, func(b array.Builder, _ *rand.Rand, m *wideModel, _ int64, n int) {
			b.(*array.Int8Builder).AppendValues(m.treat[:n], nil)
		}),
	}
	for d := 1; d <= 31; d++ {
		pct := 0
		if d > 28 { // short months leave the last days empty
			pct = 10
		}
		cols = append(cols, dailyCol(d, pct))
	}
	cols = append(cols,
		intCol("interval_reads", 2600, 3000, 0),
		intCol("estimated_reads", 0, 40, 0),
		intCol("missed_reads", 0, 12, 0),
		intCol("peak_demand_w", 500, 25_000, 0),
		intCol("offpeak_wh", 0, 900_000, 0),
		intCol("late_fee_cents", 0, 2500, 0),
		intCol("credit_cents", 0, 50_000, 10),
		intCol("balance_cents", -20_000, 120_000, 0),
		intCol("export_wh", 0, 400_000, 0),
		intCol("read_sequence", 1, 1<<40, 0),
		intCol("device_id", 1, 1<<50, 10),
		floatCol("bill_amount", 140, 60, 0.01, 0),
		floatCol("tax_amount", 7, 3, 0.01, 0),
		floatCol("balance_due", 60, 80, 0.01, 0),
		floatCol("demand_charge", 12, 5, 0.01, 0),
		floatCol("carbon_kg", 180, 70, 0, 0),
		floatCol("avg_voltage", 230, 3, 0, 0),
		floatCol("power_factor", 0.95, 0.02, 0.001, 0),
		floatCol("max_demand_kw", 6, 2, 0.01, 10),
		floatCol("forecast_kwh", 1400, 500, 0, 10),
		floatCol("weather_adj_kwh", 1400, 450, 0, 0),
		catCol("rate_class", []string{"R1", "R2", "R3", "RS", "RT", "RE"}, []float64{40, 25, 15, 10, 6, 4}, 0),
		catCol("billing_cycle", cycleNames(21), nil, 0),
		catCol("payment_method", []string{"direct_debit", "card", "bank_transfer", "cash", "cheque"}, []float64{60, 20, 12, 6, 2}, 0),
		catCol("language", []string{"en", "es", "fr", "pt", "pl", "ar"}, []float64{80, 8, 4, 3, 3, 2}, 0),
		catCol("contact_channel", []string{"email", "sms", "post", "phone", "app"}, nil, 10),
		catCol("service_status", []string{"active", "pending_move", "suspended", "closing"}, []float64{92, 4, 3, 1}, 0),
		catCol("meter_type", []string{"smart_v1", "smart_v2", "legacy", "prepay_key", "export"}, []float64{35, 40, 15, 6, 4}, 0),
		catCol("weather_station", stationNames(40), nil, 0),
		catCol("paperless", []string{"yes", "no"}, []float64{55, 45}, 0),
		catCol("budget_billing", []string{"yes", "no"}, []float64{22, 78}, 0),
		catCol("read_method", []string{"remote", "manual", "customer"}, []float64{85, 10, 5}, 0),
		catCol("segment_code", []string{"S01", "S02", "S03", "S04", "S05", "S06", "S07", "S08", "S09", "S10", "S11", "S12"}, nil, 0),
		catCol("collections_stage", []string{"reminder", "notice", "plan", "referral"}, []float64{50, 25, 20, 5}, 10),
		catCol("marketing_opt", []string{"in", "out", "unknown"}, []float64{40, 45, 15}, 0),
		idCol("email_hash", "", 1<<62, 16, 16, 10),
	)
	return cols
}

func cycleNames(n int) []string {
	s := make([]string, n)
	for i := range s {
		s[i] = fmt.Sprintf("C%02d", i+1)
	}
	return s
}

func stationNames(n int) []string {
	s := make([]string, n)
	for i := range s {
		s[i] = fmt.Sprintf("WS-%02d", i+1)
	}
	return s
}

// runWidegen writes the wide table with heft's own Parquet sink, one batch
// at a time, so memory is bounded by the batch and not by -rows.
func runWidegen(args []string) error {
	fs := flag.NewFlagSet("widegen", flag.ContinueOnError)
	out := fs.String("out", "wide.parquet", "output Parquet file")
	rows := fs.Int64("rows", 2_000_000, "rows")
	batch := fs.Int("batch", 65536, "rows per batch")
	seed := fs.Uint64("seed", 1, "random seed")
	if err := fs.Parse(args); err != nil {
		return err
	}
	if *rows < 0 || *batch <= 0 {
		return fmt.Errorf("widegen: -rows must be ≥ 0 and -batch > 0 (got %d and %d)", *rows, *batch)
	}
	cols := wideColumns()
	fields := make([]arrow.Field, len(cols))
	for i, c := range cols {
		fields[i] = c.field
	}
	if len(fields) != 101 {
		return fmt.Errorf("widegen: %d columns defined, want 101 (20 model, treatment, 80 others)", len(fields))
	}
	sc := arrow.NewSchema(fields, nil)
	sink, err := pipeline.NewParquetSink(*out, sc, pipeline.ParquetSinkOptions{CreatedBy: "heftbench widegen"})
	if err != nil {
		return err
	}
	// One stream per column and one for the model, so a column's values do
	// not change when another column's definition does.
	modelRNG := rand.New(rand.NewPCG(*seed, 0))
	rngs := make([]*rand.Rand, len(cols))
	for i := range rngs {
		rngs[i] = rand.New(rand.NewPCG(*seed, uint64(i+1)))
	}
	b := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer b.Release()
	var m wideModel
	ctx := context.Background()
	for done := int64(0); done < *rows; {
		n := int(min(int64(*batch), *rows-done))
		m.draw(modelRNG, n)
		for i, c := range cols {
			fb := b.Field(i)
			fb.Reserve(n)
			c.fill(fb, rngs[i], &m, done, n)
		}
		rec := b.NewRecordBatch()
		err := sink.Write(ctx, rec)
		rec.Release()
		if err != nil {
			sink.Abort()
			return err
		}
		done += int64(n)
	}
	return sink.Close()
}
