package demand

import "math"

func sqrt(x float64) float64 { return math.Sqrt(x) }
func abs(x float64) float64  { return math.Abs(x) }
