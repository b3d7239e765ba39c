package stage

import (
	"context"
	"errors"
	"fmt"
	"strconv"
	"strings"

	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score/job"
)

// Exit codes: heft score's (README.md, "Exit codes"), and ExitJob for a job
// the runner failed for reasons of its own.
const (
	ExitOK          = 0
	ExitInternal    = 1
	ExitUsage       = 2
	ExitInput       = 3
	ExitModel       = 4
	ExitOutput      = 6
	ExitGate        = 7
	ExitJob         = 8 // the runner reported the job failed, with no heft error in its report
	ExitInterrupted = 130
)

// ExitCode maps an error of heft's packages to heft score's exit code for
// it.
func ExitCode(err error) int {
	var (
		je *job.Error
		pe *pipeline.Error
	)
	switch {
	case errors.Is(err, context.Canceled):
		return ExitInterrupted
	case errors.As(err, &je):
		switch je.Kind {
		case job.KindUsage:
			return ExitUsage
		case job.KindModel:
			return ExitModel
		case job.KindOutput:
			return ExitOutput
		}
	case errors.As(err, &pe):
		return ExitInput
	}
	return ExitInput
}

// stepFailed starts the error of a step (scoring a part, merging states,
// finishing) inside whatever the runner wraps around it (its plan, its
// stages), with the exit code heft score would give: Failure finds it.
const stepFailed = "heft step failed (exit "

// marked is err as a step returns it to the runner.
func marked(err error, code int) error {
	return fmt.Errorf("%s%d): %v", stepFailed, code, err)
}

// Failure returns heft's message and exit code from the error of a job the
// runner failed; ok is false when the error holds none (the runner failed
// for reasons of its own).
func Failure(err error) (msg string, code int, ok bool) {
	s := err.Error()
	i := strings.LastIndex(s, stepFailed)
	if i < 0 {
		return "", 0, false
	}
	s = s[i+len(stepFailed):]
	end := strings.Index(s, "): ")
	if end < 0 {
		return "", 0, false
	}
	code, cerr := strconv.Atoi(s[:end])
	if cerr != nil {
		return "", 0, false
	}
	msg = s[end+3:]
	if j := strings.IndexByte(msg, '\n'); j >= 0 {
		msg = msg[:j]
	}
	return msg, code, true
}
