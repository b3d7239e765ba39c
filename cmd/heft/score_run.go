package main

import (
	"fmt"
	"path/filepath"
	"strings"

	"github.com/heft-project/heft/score/job"
)

func outputFormat(flag, out string, mode outputMode) (job.Format, error) {
	switch strings.ToLower(flag) {
	case "parquet":
		if mode == outStdout {
			return 0, usagef(fmt.Errorf("-o - writes an Arrow IPC stream; --format parquet needs a file or directory"))
		}
		return job.Parquet, nil
	case "arrow":
		return job.Arrow, nil
	case "":
		if mode == outStdout {
			return job.Arrow, nil
		}
		switch strings.ToLower(filepath.Ext(out)) {
		case ".arrow", ".feather", ".ipc", ".arrows":
			return job.Arrow, nil
		}
		return job.Parquet, nil
	}
	return 0, usagef(fmt.Errorf("--format must be parquet or arrow, not %q", flag))
}
