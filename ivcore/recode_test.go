package ivcore

import (
	"math"
	"testing"
)

// TestRecode: renumbering clusters into a larger coding keeps every block
// (empty ones added), the blocks still add to the Gram, and a bootstrap of
// the recoded moments with an identity-like coding gives the same draws.
func TestRecode(t *testing.T) {
	_, _, _, _, cols := mrozMatrices(t)
	n := len(cols[0])
	codes := make([]int32, n)
	for i := range codes {
		codes[i] = int32(i % 40)
	}
	names := []string{"lwage", "educ", "intercept", "exper", "expersq", "motheduc", "fatheduc"}
	m := Accumulate(cols, names, []ClusterDim{{Name: "g", Codes: codes, G: 40}}, 2)
	to := make([]int32, 40)
	for g := range to {
		to[g] = int32(2 * g) // every other cluster of 80 stays empty
	}
	r := m.Recode(0, to, 80)
	k := len(cols)
	for g := 0; g < 40; g++ {
		a, b := m.Clusters[0].Block(g), r.Clusters[0].Block(2*g)
		for i := range a {
			if a[i] != b[i] {
				t.Fatalf("block %d differs after recoding", g)
			}
		}
		for _, v := range r.Clusters[0].Block(2*g + 1) {
			if v != 0 {
				t.Fatalf("cluster %d should be empty", 2*g+1)
			}
		}
	}
	sum := make([]float64, k*k)
	for g := 0; g < 80; g++ {
		for i, v := range r.Clusters[0].Block(g) {
			sum[i] += v
		}
	}
	for a := 0; a < k; a++ {
		for b := 0; b < k; b++ {
			if math.Abs(sum[a*k+b]-m.Gram.At(a, b)) > 1e-9*math.Abs(m.Gram.At(a, b)) {
				t.Fatalf("recoded blocks do not add to the Gram at (%d,%d)", a, b)
			}
		}
	}
	same := make([]int32, 40)
	for g := range same {
		same[g] = int32(g)
	}
	md := Model{Y: 0, Endog: []int{1}, Exog: []int{2, 3, 4}, Instr: []int{5, 6}}
	b1, err := ClusterBootstrap(m, 0, md, TSLS, 60, 9, 1, nil)
	if err != nil {
		t.Fatal(err)
	}
	b2, err := ClusterBootstrap(m.Recode(0, same, 40), 0, md, TSLS, 60, 9, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	for r := range b1.Draws {
		for j := range b1.Draws[r] {
			if b1.Draws[r][j] != b2.Draws[r][j] {
				t.Fatalf("identity recoding changed replicate %d", r)
			}
		}
	}
}
