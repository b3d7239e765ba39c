package main

import (
	"context"
	"errors"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score/job"
)

// Exit codes, documented in README.md ("Exit codes"). They are the contract
// with schedulers: keep them stable.
const (
	ExitOK          = 0
	ExitInternal    = 1   // a bug in heft
	ExitUsage       = 2   // bad flags or arguments
	ExitInput       = 3   // bad input data: unreadable file, missing or mistyped column, bad value
	ExitModel       = 4   // model or state file unreadable, edited, too new, or not for this data
	ExitFit         = 5   // the model cannot be fitted (separation, collinearity, too few rows)
	ExitOutput      = 6   // cannot write the output (disk full, permissions, output is an input)
	ExitGate        = 7   // outputs written, but a --max-smd/--min-ess-share/--max-psi gate failed
	ExitInterrupted = 130 // stopped by SIGINT or SIGTERM; nothing was left at the target
)

// Error kinds the commands attach to errors that are not typed by the
// library packages.
type (
	usageError  struct{ error }
	modelError  struct{ error }
	outputError struct{ error }
	gateError   struct{ error }
)

func (e usageError) Unwrap() error  { return e.error }
func (e modelError) Unwrap() error  { return e.error }
func (e outputError) Unwrap() error { return e.error }
func (e gateError) Unwrap() error   { return e.error }

func usagef(err error) error {
	if err == nil {
		return nil
	}
	return usageError{err}
}

// exitCode maps an error to its exit code; the outermost kind wins.
func exitCode(ctx context.Context, err error) int {
	var (
		ue usageError
		me modelError
		oe outputError
		ge gateError
		fe *fit.FitError
		pe *pipeline.Error
		je *job.Error
	)
	switch {
	case ctx.Err() != nil || errors.Is(err, context.Canceled):
		return ExitInterrupted
	case errors.As(err, &ue), errors.As(err, &je) && je.Kind == job.KindUsage:
		return ExitUsage
	case errors.As(err, &ge):
		return ExitGate
	case errors.As(err, &me), errors.As(err, &je) && je.Kind == job.KindModel:
		return ExitModel
	case errors.As(err, &oe), errors.As(err, &je) && je.Kind == job.KindOutput:
		return ExitOutput
	case errors.As(err, &fe):
		return ExitFit
	case errors.As(err, &pe):
		return ExitInput
	}
	return ExitInput
}
