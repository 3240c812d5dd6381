package supplyshifters

import (
	"bytes"
	"math"
	"strconv"
)

// Num is a float64 that encodes as JSON null when it is NaN or infinite
// (JSON has no such numbers), so that json.Marshal of a Diagnostics value
// never fails. A statistic is NaN when it is undefined for the data at
// hand (for example a partial R² when the regressor has no variation left).
// Null decodes back to NaN.
type Num float64

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

// ptr returns a pointer to x, or nil when x is not finite; such fields
// encode as null.
func ptr(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}
