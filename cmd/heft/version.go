package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score/job"
)

// Version is heft's release version; it is written into model files,
// output metadata and reports.
const Version = job.Version

func newVersionCmd(env *Env) *cobra.Command {
	return &cobra.Command{
		Use:   "version",
		Short: "Print heft's version and the model-format version",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			fmt.Fprintf(env.Stdout, "heft %s (model format %s v%d)\n", Version, fit.FormatName, fit.FormatVersion)
			return nil
		},
	}
}
