package job

// Kind is what an Error says is wrong, for a command's exit code. Errors
// without one are the library packages' own (*pipeline.Error for input,
// *fit.FitError, ...).
type Kind int

const (
	// KindUsage: the options do not fit the data (a column name given twice,
	// a --by column the table lacks).
	KindUsage Kind = iota + 1
	// KindOutput: the output cannot be written (disk full, permissions).
	KindOutput
	// KindModel: the model or state file is unreadable or not for this
	// data (left to callers: Runner has its model already).
	KindModel
)

// Error is an error of a known Kind.
type Error struct {
	Kind Kind
	Err  error
}

func (e *Error) Error() string { return e.Err.Error() }
func (e *Error) Unwrap() error { return e.Err }

func usage(err error) error  { return &Error{Kind: KindUsage, Err: err} }
func output(err error) error { return &Error{Kind: KindOutput, Err: err} }
