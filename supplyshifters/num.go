package supplyshifters

import (
	"bytes"
	"math"
	"strconv"
	"strings"
)

// Num is a float64 that encodes as JSON null and as an empty CSV cell
// when it is NaN or infinite (JSON has no such numbers), so that
// json.Marshal of a Diagnostics value, or of any report table, never
// fails. A statistic is NaN when it is undefined for the data at hand (for
// example a partial R² when the regressor has no variation left). Null and
// an empty cell decode back to NaN.
type Num float64

// F returns x as a float64.
func (x Num) F() float64 { return float64(x) }

// Finite reports whether x is neither NaN nor infinite.
func (x Num) Finite() bool {
	f := float64(x)
	return !math.IsNaN(f) && !math.IsInf(f, 0)
}

// MarshalJSON encodes x as a JSON number, or null when it is not finite.
func (x Num) MarshalJSON() ([]byte, error) {
	if !x.Finite() {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, float64(x), 'g', -1, 64), nil
}

// UnmarshalJSON decodes a JSON number, or null as NaN.
func (x *Num) UnmarshalJSON(b []byte) error {
	b = bytes.TrimSpace(b)
	if string(b) == "null" {
		*x = Num(math.NaN())
		return nil
	}
	f, err := strconv.ParseFloat(string(b), 64)
	if err != nil {
		return err
	}
	*x = Num(f)
	return nil
}

// MarshalCSV writes the shortest decimal that reads back to the same
// float64, or an empty cell.
func (x Num) MarshalCSV() (string, error) {
	if !x.Finite() {
		return "", nil
	}
	return strconv.FormatFloat(float64(x), 'g', -1, 64), nil
}

// UnmarshalCSV reads a number, or an empty cell as NaN.
func (x *Num) UnmarshalCSV(s string) error {
	s = strings.TrimSpace(s)
	if s == "" {
		*x = Num(math.NaN())
		return nil
	}
	f, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return err
	}
	*x = Num(f)
	return nil
}

// ptr returns a pointer to x, or nil when x is not finite; such fields
// encode as null.
func ptr(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}
