package stage

import (
	"context"
	"reflect"

	"github.com/apache/beam/sdks/v2/go/pkg/beam"
	"github.com/apache/beam/sdks/v2/go/pkg/beam/register"
)

func init() {
	register.DoFn2x2[context.Context, Part, Result, error](&scoreFn{})
	register.Combiner2[Acc, Result](&mergeFn{})
	register.DoFn2x1[context.Context, Acc, error](&finishFn{})
	beam.RegisterType(reflect.TypeOf((*Part)(nil)).Elem())
	beam.RegisterType(reflect.TypeOf((*Result)(nil)).Elem())
	beam.RegisterCoder(reflect.TypeOf((*Acc)(nil)).Elem(), encodeAcc, decodeAcc)
}

// Build adds the job to s:
//
//	Create(parts) ─► Reshuffle ─► ParDo(score a part) ─► Combine(merge states) ─► ParDo(finish)
//
// The reshuffle lets the runner spread the parts over its workers rather
// than fuse them with the step that created them.
func (j *Job) Build(s beam.Scope) {
	s = s.Scope("heft")
	parts := make([]any, len(j.parts))
	for i, p := range j.parts {
		parts[i] = p
	}
	col := beam.Create(s.Scope("parts"), parts...)
	col = beam.Reshuffle(s.Scope("spread"), col)
	results := beam.ParDo(s.Scope("score"), &scoreFn{S: j.cfg.Settings}, col)
	total := beam.Combine(s.Scope("merge"), &mergeFn{}, results)
	beam.ParDo0(s.Scope("finish"), &finishFn{
		Parts: len(j.parts), Inputs: j.inputs, Out: j.cfg.Out,
		StatePath: j.cfg.StatePath, ReportPath: j.cfg.ReportPath, Start: j.start.UnixNano(),
	}, total)
}
