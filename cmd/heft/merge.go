package main

import (
	"crypto/sha256"
	"errors"
	"fmt"
	"os"

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
			seen := map[[32]byte]string{}
			inputOf := map[string]string{}
			for _, p := range args {
				data, err := os.ReadFile(p)
				if err != nil {
					return modelError{err}
				}
				// The same state twice would count its rows twice.
				sum := sha256.Sum256(data)
				if q, ok := seen[sum]; ok {
					return usagef(fmt.Errorf("%s and %s are the same state; merging it twice would count its rows twice", q, p))
				}
				seen[sum] = p
				s, err := aggregate.UnmarshalState(p, data)
				if err != nil {
					return modelError{err}
				}
				for _, in := range s.Inputs {
					if q, ok := inputOf[in]; ok {
						env.Logf("heft merge: %s and %s both list input %s; if it is the same table, its rows are counted twice", q, p, in)
					}
					inputOf[in] = p
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
