package stage

import (
	"context"
	"fmt"
	"path/filepath"
	"time"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/pipeline"
)

// finishFn is the job's last step: with every part's output committed, it
// writes the merged state and the report, then the success marker.
type finishFn struct {
	Parts      int
	Inputs     []string
	Out        string
	StatePath  string
	ReportPath string
	Start      int64 // the launch, in Unix nanoseconds, for the report's run time
}

func (f *finishFn) ProcessElement(ctx context.Context, a Acc) error {
	if len(a.Parts) != f.Parts {
		return marked(fmt.Errorf("the job merged %d parts of %d; the success marker is not written", len(a.Parts), f.Parts), ExitInternal)
	}
	for i, p := range a.Parts {
		if p != i {
			return marked(fmt.Errorf("the job merged part %d where part %d was due; the success marker is not written", p, i), ExitInternal)
		}
	}
	if s := a.State; s != nil {
		s.Inputs = f.Inputs
		s.RunSeconds = time.Since(time.Unix(0, f.Start)).Seconds()
		if err := writeResults(s, f.StatePath, f.ReportPath); err != nil {
			return marked(err, ExitOutput)
		}
	}
	if err := pipeline.WriteFileAtomic(filepath.Join(f.Out, pipeline.SuccessMarker), nil); err != nil {
		return marked(err, ExitOutput)
	}
	return nil
}

// writeResults writes the state and the report as heft score does, each
// atomically.
func writeResults(s *aggregate.State, statePath, reportPath string) error {
	if statePath != "" {
		if err := s.WriteFile(statePath); err != nil {
			return fmt.Errorf("writing the state: %w", err)
		}
	}
	if reportPath != "" {
		if err := s.Report().WriteFile(reportPath); err != nil {
			return fmt.Errorf("writing the report: %w", err)
		}
	}
	return nil
}
