package fit

import (
	"fmt"
	"strings"
)

// Reasons a model cannot be fitted, the values of FitError.Reason.
const (
	ReasonCompleteSeparation      = "complete separation"
	ReasonQuasiCompleteSeparation = "quasi-complete separation"
	ReasonCollinear               = "collinear terms"
	ReasonTooFewRows              = "more terms than rows"
	ReasonNoResidualDF            = "no residual degrees of freedom"
	ReasonOneRow                  = "only one row"
	ReasonNoRows                  = "no rows"
	ReasonNoVariation             = "no variation in the outcome"
	ReasonNotBinary               = "outcome is not 0/1"
	ReasonNonFinite               = "non-finite value"
	ReasonSingular                = "singular information matrix"
)

// FitError reports a model that cannot be fitted. Terms names the offending
// terms (none when the problem is the outcome or the row count); Detail
// says more, such as which term is constant or the row of a bad value.
type FitError struct {
	Reason string
	Terms  []string
	Detail string
}

func (e *FitError) Error() string {
	var b strings.Builder
	b.WriteString("cannot fit model: ")
	b.WriteString(e.Reason)
	if len(e.Terms) > 0 {
		b.WriteString(" (")
		for i, t := range e.Terms {
			if i > 0 {
				b.WriteString(", ")
			}
			fmt.Fprintf(&b, "%q", t)
		}
		b.WriteString(")")
	}
	if e.Detail != "" {
		b.WriteString(": ")
		b.WriteString(e.Detail)
	}
	return b.String()
}
