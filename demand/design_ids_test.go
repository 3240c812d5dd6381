package demand

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

// TestModelIDsMatchIDs checks that the table-based ids of Build are the
// codes and level counts Panel.IDs gives, for text, whole-number and
// other numeric columns, with missing cells, and for interactions of two
// and three columns. Panel.IDs is the reference.
func TestModelIDsMatchIDs(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	const n = 5000
	p := NewPanel("ids", n)
	store := &TextColumn{Codes: make([]int32, n)}
	for i := range 40 {
		store.Levels = append(store.Levels, "S"+strconv.Itoa(i))
	}
	week := make([]float64, n)
	signed := make([]float64, n)
	frac := make([]float64, n)
	wide := make([]float64, n)
	empty := make([]float64, n)
	for i := range n {
		store.Codes[i] = int32(rng.IntN(40))
		week[i] = float64(1 + rng.IntN(150))
		signed[i] = float64(rng.IntN(21) - 10)
		frac[i] = float64(rng.IntN(30)) / 4
		wide[i] = float64(rng.IntN(3)) * 1e9
		empty[i] = math.NaN()
		if rng.IntN(50) == 0 {
			store.Codes[i] = -1
		}
		if rng.IntN(40) == 0 {
			week[i] = math.NaN()
		}
		if signed[i] == 0 && rng.IntN(2) == 0 {
			signed[i] = math.Copysign(0, -1)
		}
	}
	p.AddText("store", store)
	p.AddNum("week", week)
	p.AddNum("signed", signed)
	p.AddNum("frac", frac)
	p.AddNum("wide", wide)
	p.AddNum("empty", empty)
	for _, name := range []string{"store", "week", "signed", "frac", "wide", "empty",
		"store*week", "week*store", "store*signed*week", "frac*store", "store * week", "wide*week", "missing", "store*missing"} {
		want, levels, errWant := p.IDs(name)
		got, l, err := modelIDs(p, name)
		if (err == nil) != (errWant == nil) || err != nil && err.Error() != errWant.Error() {
			t.Errorf("%s: error %v, IDs %v", name, err, errWant)
			continue
		}
		if err != nil {
			continue
		}
		if l != len(levels) || !equalInt32(got, want) {
			t.Errorf("%s: %d levels (IDs %d) or codes differ", name, l, len(levels))
		}
	}
}
