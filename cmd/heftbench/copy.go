package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"runtime/pprof"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	pq "github.com/parquet-go/parquet-go"

	"github.com/heft-project/heft/pipeline"
)

// runCopy reads every batch of -in and writes it to -out: the I/O half of a
// scoring run with no scoring in between.
func runCopy(args []string) error {
	fs := flag.NewFlagSet("copy", flag.ContinueOnError)
	in := fs.String("in", "bench.parquet", "input Parquet file")
	out := fs.String("out", "copy.parquet", "output Parquet file")
	path := fs.String("path", "pqarrow", "read (pqarrow read, no write: the floor), pqarrow (heft's sink and engine), pqarrow-plain (pqarrow FileWriter, one goroutine), parquet-go (CopyRows), parquet-go-rg (WriteRowGroup), arrow-parquet-go (pqarrow read, parquet-go write)")
	batch := fs.Int64("batch", 65536, "rows per batch read (pqarrow paths)")
	readPar := fs.Bool("readpar", false, "decode the columns of a batch in parallel (pqarrow paths)")
	readDict := fs.Bool("readdict", false, "read string columns as Arrow dictionaries (pqarrow paths)")
	workers := fs.Int("workers", 0, "pqarrow: columns encoded at once (0 = GOMAXPROCS)")
	engineWorkers := fs.Int("engine-workers", 1, "pqarrow: engine workers (identity transform)")
	depth := fs.Int("depth", 0, "pqarrow: engine queue depth (0 = 2*workers)")
	dict := fs.String("dict", "", "pqarrow: dictionary columns: auto (default), strings, all or none")
	page := fs.Int64("pagesize", 0, "pqarrow: data page size in bytes (0 = 1 MiB)")
	rg := fs.Int64("rowgroup", 0, "rows per row group (0 = 131072)")
	noStats := fs.Bool("nostats", false, "pqarrow: no column statistics")
	noSchema := fs.Bool("noarrowschema", false, "pqarrow: do not store the Arrow schema")
	cpuprof := fs.String("cpuprofile", "", "write a CPU profile to this file")
	memprof := fs.String("memprofile", "", "pqarrow: write a heap profile to this file half way through")
	if err := fs.Parse(args); err != nil {
		return err
	}
	if *cpuprof != "" {
		pf, err := os.Create(*cpuprof)
		if err != nil {
			return err
		}
		defer pf.Close()
		if err := pprof.StartCPUProfile(pf); err != nil {
			return err
		}
		defer pprof.StopCPUProfile()
	}
	ro := readOpts{batch: *batch, par: *readPar, dict: *readDict}
	start := time.Now()
	var rows int64
	var err error
	switch *path {
	case "pqarrow":
		rows, err = copyHeft(*in, *out, ro, pipeline.ParquetSinkOptions{
			RowGroupRows: *rg, Workers: *workers, Dictionary: *dict, DataPageSize: *page,
			NoStatistics: *noStats, NoArrowSchema: *noSchema, CreatedBy: "heftbench",
		}, pipeline.EngineOptions{Workers: *engineWorkers, QueueDepth: *depth, Progress: heapAt(*memprof, 1_000_000)})
	case "read":
		rows, err = readOnly(*in, ro)
	case "pqarrow-plain":
		rows, err = copyPqarrowPlain(*in, *out, ro, *rg)
	case "arrow-parquet-go":
		rows, err = copyArrowToParquetGo(*in, *out, ro, *rg)
	case "parquet-go", "parquet-go-rg":
		rows, err = copyParquetGo(*in, *out, *path == "parquet-go-rg", *rg)
	default:
		err = fmt.Errorf("unknown -path %q", *path)
	}
	if err != nil {
		return err
	}
	fmt.Fprintf(os.Stderr, "%s: %d rows in %.3fs\n", *path, rows, time.Since(start).Seconds())
	return nil
}

// heapAt returns a progress callback that writes a heap profile once rows
// reach n, or nil without a file name.
func heapAt(name string, n int64) func(int64) {
	if name == "" {
		return nil
	}
	done := false
	return func(rows int64) {
		if done || rows < n {
			return
		}
		done = true
		if f, err := os.Create(name); err == nil {
			pprof.WriteHeapProfile(f)
			f.Close()
		}
	}
}

// recordSource adapts a pqarrow record reader to pipeline.Source.
type recordSource struct {
	rr  pqarrow.RecordReader
	cur arrow.RecordBatch
	row int64
	err error
}

func (s *recordSource) Schema() *arrow.Schema { return s.rr.Schema() }
func (s *recordSource) Next(context.Context) bool {
	if s.cur != nil {
		s.row += s.cur.NumRows()
	}
	if !s.rr.Next() {
		if err := s.rr.Err(); err != nil && !errors.Is(err, io.EOF) {
			s.err = err
		}
		return false
	}
	s.cur = s.rr.RecordBatch()
	return true
}
func (s *recordSource) RecordBatch() arrow.RecordBatch { return s.cur }
func (s *recordSource) Location() pipeline.Location {
	return pipeline.Location{RowGroup: -1, Row: s.row}
}
func (s *recordSource) Err() error   { return s.err }
func (s *recordSource) Close() error { s.rr.Release(); return nil }

type identity struct{}

func (identity) Apply(_ context.Context, rec arrow.RecordBatch, _ pipeline.Location) (arrow.RecordBatch, any, error) {
	rec.Retain()
	return rec, nil, nil
}

// readOpts are the pqarrow read knobs.
type readOpts struct {
	batch int64
	par   bool // decode a batch's columns in parallel
	dict  bool // read byte-array columns as Arrow dictionaries
}

func openArrow(in string, ro readOpts) (*file.Reader, pqarrow.RecordReader, error) {
	pr, err := file.OpenParquetFile(in, false)
	if err != nil {
		return nil, nil, err
	}
	props := pqarrow.ArrowReadProperties{BatchSize: ro.batch, Parallel: ro.par}
	if ro.dict {
		sc := pr.MetaData().Schema
		for i := range sc.NumColumns() {
			if sc.Column(i).PhysicalType() == parquet.Types.ByteArray {
				props.SetReadDict(i, true)
			}
		}
	}
	fr, err := pqarrow.NewFileReader(pr, props, memory.DefaultAllocator)
	if err != nil {
		pr.Close()
		return nil, nil, err
	}
	rr, err := fr.GetRecordReader(context.Background(), nil, nil)
	if err != nil {
		pr.Close()
		return nil, nil, err
	}
	return pr, rr, nil
}

func copyHeft(in, out string, ro readOpts, opt pipeline.ParquetSinkOptions, eopt pipeline.EngineOptions) (int64, error) {
	pr, rr, err := openArrow(in, ro)
	if err != nil {
		return 0, err
	}
	defer pr.Close()
	src := &recordSource{rr: rr}
	defer src.Close()
	sink, err := pipeline.NewParquetSink(out, rr.Schema(), opt)
	if err != nil {
		return 0, err
	}
	start := time.Now()
	rows, err := pipeline.Run(context.Background(), src, sink, func() (pipeline.Transform, error) { return identity{}, nil }, nil, eopt)
	if err != nil {
		sink.Abort()
		return rows, err
	}
	mid := time.Now()
	err = sink.Close()
	fmt.Fprintf(os.Stderr, "pqarrow: stream %.3fs, close+fsync+rename %.3fs\n", mid.Sub(start).Seconds(), time.Since(mid).Seconds())
	return rows, err
}

func readOnly(in string, ro readOpts) (int64, error) {
	pr, rr, err := openArrow(in, ro)
	if err != nil {
		return 0, err
	}
	defer pr.Close()
	defer rr.Release()
	var rows int64
	for rr.Next() {
		rows += rr.RecordBatch().NumRows()
	}
	if err := rr.Err(); err != nil && !errors.Is(err, io.EOF) {
		return rows, err
	}
	return rows, nil
}

func copyPqarrowPlain(in, out string, ro readOpts, rg int64) (int64, error) {
	pr, rr, err := openArrow(in, ro)
	if err != nil {
		return 0, err
	}
	defer pr.Close()
	defer rr.Release()
	f, err := os.Create(out)
	if err != nil {
		return 0, err
	}
	if rg <= 0 {
		rg = pipeline.DefaultRowGroupRows
	}
	props := parquet.NewWriterProperties(parquet.WithCompression(compress.Codecs.Snappy), parquet.WithMaxRowGroupLength(rg))
	fw, err := pqarrow.NewFileWriter(rr.Schema(), f, props, pqarrow.DefaultWriterProps())
	if err != nil {
		return 0, err
	}
	var rows int64
	for rr.Next() {
		rec := rr.RecordBatch()
		if err := fw.WriteBuffered(rec); err != nil {
			return rows, err
		}
		rows += rec.NumRows()
	}
	if err := rr.Err(); err != nil && !errors.Is(err, io.EOF) {
		return rows, err
	}
	return rows, fw.Close() // closes f
}

func copyParquetGo(in, out string, byRowGroup bool, rg int64) (int64, error) {
	f, err := os.Open(in)
	if err != nil {
		return 0, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return 0, err
	}
	pf, err := pq.OpenFile(f, st.Size())
	if err != nil {
		return 0, err
	}
	o, err := os.Create(out)
	if err != nil {
		return 0, err
	}
	defer o.Close()
	if rg <= 0 {
		rg = pipeline.DefaultRowGroupRows
	}
	w := pq.NewGenericWriter[any](o, pf.Schema(), pq.Compression(&pq.Snappy), pq.MaxRowsPerRowGroup(rg))
	var rows int64
	if byRowGroup {
		for _, g := range pf.RowGroups() {
			n, err := w.WriteRowGroup(g)
			rows += n
			if err != nil {
				return rows, err
			}
		}
	} else {
		r := pq.NewReader(f, pf.Schema())
		defer r.Close()
		rows, err = pq.CopyRows(w, r)
		if err != nil {
			return rows, err
		}
	}
	return rows, w.Close()
}
