package ivcore

import "fmt"

// DropSingletons sets keep[i] = false for every row that is the only kept
// row of its level in some effect, and repeats until no such row is left,
// because dropping one row can leave another row alone in its level. Rows
// with keep[i] == false on entry stay dropped and are not counted. It
// returns the number of rows it dropped.
//
// A singleton row is fitted exactly by its own level's coefficient: its
// residual is zero whatever the other regressors, so it adds nothing to the
// estimates but inflates the row count used in small-sample corrections
// (Correia 2015, "Singletons, cluster-robust standard errors and fixed
// effects: a bad mix", technical note, Duke University).
//
// The work is O(N·K): each level keeps the number and the sum of the
// indices of its kept rows, so that when the number falls to one the
// remaining row is known without a search.
//
// DropSingletons panics if an effect's codes differ in length from keep or
// lie outside [0, Levels).
func DropSingletons(effects []Effect, keep []bool) int {
	n := len(keep)
	feCheckEffects(effects, n)
	if len(effects) == 0 {
		return 0
	}
	type level struct{ k, l int }
	cnt := make([][]int, len(effects))
	idx := make([][]int, len(effects)) // sum of kept row indices per level
	var queue []level
	for k, e := range effects {
		cnt[k] = make([]int, e.Levels)
		idx[k] = make([]int, e.Levels)
		for i, c := range e.Codes {
			if keep[i] {
				cnt[k][c]++
				idx[k][c] += i
			}
		}
		for l, v := range cnt[k] {
			if v == 1 {
				queue = append(queue, level{k, l})
			}
		}
	}
	dropped := 0
	for head := 0; head < len(queue); head++ {
		q := queue[head]
		if cnt[q.k][q.l] != 1 {
			continue // its last row went with another level
		}
		row := idx[q.k][q.l]
		if !keep[row] {
			panic(fmt.Sprintf("ivcore: DropSingletons lost track of row %d", row))
		}
		keep[row] = false
		dropped++
		for k, e := range effects {
			c := e.Codes[row]
			cnt[k][c]--
			idx[k][c] -= row
			if cnt[k][c] == 1 {
				queue = append(queue, level{k, int(c)})
			}
		}
	}
	return dropped
}

// Compact returns the effects restricted to the rows with keep[i] true,
// with each effect's codes renumbered 0…L-1 over the levels that still
// occur, in order of first appearance among the kept rows, and the indices
// of the kept rows in increasing order. out[k].Codes[m] is the new code of
// row rows[m]. Names are kept. Compact panics if an effect's codes differ
// in length from keep or lie outside [0, Levels).
func Compact(effects []Effect, keep []bool) (out []Effect, rows []int) {
	feCheckEffects(effects, len(keep))
	for i, ok := range keep {
		if ok {
			rows = append(rows, i)
		}
	}
	out = make([]Effect, len(effects))
	for k, e := range effects {
		remap := make([]int32, e.Levels)
		for l := range remap {
			remap[l] = -1
		}
		codes := make([]int32, len(rows))
		var next int32
		for m, i := range rows {
			c := e.Codes[i]
			if remap[c] < 0 {
				remap[c] = next
				next++
			}
			codes[m] = remap[c]
		}
		out[k] = Effect{Name: e.Name, Codes: codes, Levels: int(next)}
	}
	return out, rows
}
