package main

import (
	"errors"
	"fmt"

	"github.com/spf13/cobra"

	"github.com/heft-project/heft/aggregate"
)

func newMergeCmd(env *Env) *cobra.Command {
	var out, report string
	cmd := &cobra.Command{
		Use:   "merge [-o STATE.json] [--report REPORT.json] STATE...",
		Short: "Merge accumulator states from partitions into one state and one report",
		Long: `Merge combines states written by 'heft score --state' on partitions of a
table — any number, in any order, from different processes or machines —
into the state and report a single pass over the whole table would give.
States from different models or weight policies are refused.`,
		Args: usageArgs(cobra.MinimumNArgs(1)),
		RunE: func(cmd *cobra.Command, args []string) error {
			if out == "" && report == "" {
				return usagef(errors.New("nothing to write: give -o and/or --report"))
			}
			var total *aggregate.State
			for _, p := range args {
				s, err := aggregate.ReadState(p)
				if err != nil {
					return modelError{err}
				}
				if total == nil {
					total = s
					continue
				}
				if err := total.Merge(s); err != nil {
					return modelError{fmt.Errorf("%s: %w", p, err)}
				}
			}
			return finishReport(env, total, out, report)
		},
	}
	cmd.Flags().StringVarP(&out, "output", "o", "", "merged state file")
	cmd.Flags().StringVar(&report, "report", "", "report JSON (- for stdout)")
	return cmd
}
