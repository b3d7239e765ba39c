package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"github.com/heft-project/heft/fit"
)

// Version is heft's release version; it is written into model files,
// output metadata and reports.
const Version = "0.1.0"

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
