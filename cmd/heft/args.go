package main

import (
	"fmt"
	"strings"

	"github.com/spf13/cobra"
)

// usageArgs marks a positional-argument check's failure as a usage error.
func usageArgs(check cobra.PositionalArgs) cobra.PositionalArgs {
	return func(cmd *cobra.Command, args []string) error {
		return usagef(check(cmd, args))
	}
}

// splitList splits a comma-separated flag value, trimming blanks.
func splitList(s string) []string {
	var out []string
	for _, p := range strings.Split(s, ",") {
		if p = strings.TrimSpace(p); p != "" {
			out = append(out, p)
		}
	}
	return out
}

// requireFlag fails with a usage error when a required string flag is empty.
func requireFlag(name, value string) error {
	if value == "" {
		return usagef(fmt.Errorf("--%s is required", name))
	}
	return nil
}
