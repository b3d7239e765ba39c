// Command heftbench measures heft's Parquet read and write paths against
// parquet-go on a table shaped like heft's inputs.
//
//	go run ./cmd/heftbench gen -out table.parquet -rows 2000000
//	go run ./cmd/heftbench copy -in table.parquet -out copy.parquet -path pqarrow
//	go run ./cmd/heftbench cmp -a table.parquet -b copy.parquet
//	go run ./cmd/heftbench widegen -out wide.parquet -rows 2000000
//	go run ./cmd/heftbench decode -in wide.parquet -columns region,tariff
//
// Time it as a whole process (/usr/bin/time -v) to get wall time and peak
// RSS; copy also prints its own wall time and rows to stderr.
package main

import (
	"fmt"
	"os"
)

func main() {
	if len(os.Args) < 2 {
		fmt.Fprintln(os.Stderr, "usage: heftbench gen|widegen|copy|decode|cmp [flags]")
		os.Exit(2)
	}
	var err error
	switch os.Args[1] {
	case "gen":
		err = runGen(os.Args[2:])
	case "copy":
		err = runCopy(os.Args[2:])
	case "cmp":
		err = runCmp(os.Args[2:])
	case "widegen":
		err = runWidegen(os.Args[2:])
	case "decode":
		err = runDecode(os.Args[2:])
	default:
		err = fmt.Errorf("unknown command %q (want gen, widegen, copy, decode or cmp)", os.Args[1])
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "heftbench:", err)
		os.Exit(1)
	}
}
