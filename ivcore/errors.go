package ivcore

import (
	"errors"
	"fmt"
	"strings"
)

// Sentinel causes for errors.Is.
var (
	// ErrOrderCondition: fewer excluded instruments than endogenous regressors.
	ErrOrderCondition = errors.New("ivcore: fewer instruments than endogenous regressors")
	// ErrCollinear: a column is a linear combination of others.
	ErrCollinear = errors.New("ivcore: collinear columns")
	// ErrNoVariation: a column has no variation left after fixed effects.
	ErrNoVariation = errors.New("ivcore: no variation after fixed effects")
	// ErrTooFewRows: fewer rows than parameters.
	ErrTooFewRows = errors.New("ivcore: too few observations")
)

// OrderError reports a failed order condition with the counts.
type OrderError struct {
	Endogenous  []string
	Instruments []string
}

func (e *OrderError) Error() string {
	return fmt.Sprintf("the model has %d endogenous regressor(s) (%s) but only %d excluded instrument(s) (%s); each endogenous regressor needs at least one instrument of its own: add cost shifters (--shifters or --instruments), or treat fewer columns as endogenous (--estimator ols fits the plain regression, which simultaneity biases)",
		len(e.Endogenous), strings.Join(e.Endogenous, ", "), len(e.Instruments), listOrNone(e.Instruments))
}

func (e *OrderError) Unwrap() error { return ErrOrderCondition }

// CollinearError names a column that is (numerically) a linear
// combination of earlier columns, and those columns.
type CollinearError struct {
	Column string
	// Role is "regressor" or "instrument".
	Role string
	// On lists the earlier columns it depends on (empty: the column is
	// zero after fixed effects were absorbed).
	On []string
	// Ratio is the share of the column's sum of squares not explained by
	// the others (compared against the tolerance).
	Ratio float64
}

func (e *CollinearError) Error() string {
	if len(e.On) == 0 {
		return fmt.Sprintf("singular design: %s %q has no variation of its own", e.Role, e.Column)
	}
	hint := "drop one of them"
	if e.Role == "instrument" {
		hint = "this instrument adds nothing beyond the others and the controls; drop it"
	}
	return fmt.Sprintf("singular design: %s %q is a linear combination of %s (unexplained share %.2g); %s",
		e.Role, e.Column, quoteList(e.On), e.Ratio, hint)
}

func (e *CollinearError) Unwrap() error { return ErrCollinear }

// NoVariationError names a column that the fixed effects absorb entirely.
type NoVariationError struct {
	Column string
	Role   string
}

func (e *NoVariationError) Error() string {
	return fmt.Sprintf("%s %q has no variation left after the fixed effects are absorbed (it is constant within them); drop it, or absorb fewer effects", e.Role, e.Column)
}

func (e *NoVariationError) Unwrap() error { return ErrNoVariation }

func quoteList(s []string) string {
	q := make([]string, len(s))
	for i, v := range s {
		q[i] = fmt.Sprintf("%q", v)
	}
	return strings.Join(q, ", ")
}

func listOrNone(s []string) string {
	if len(s) == 0 {
		return "none"
	}
	return strings.Join(s, ", ")
}
