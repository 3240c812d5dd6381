package supplyshifters

import (
	"errors"
	"fmt"
	"math"
	"math/big"
	"runtime"
	"sort"
	"strings"
	"sync"

	"priceiv/demand"
	"priceiv/ivcore"
)

// Verdicts of a screened combination of shifters, best first. The words
// are ours; the rule that assigns them is documented on ScreenRow.Verdict.
const (
	VerdictSolid     = "solid"
	VerdictUsable    = "usable"
	VerdictWeak      = "weak"
	VerdictSuspect   = "suspect"
	VerdictWrongSign = "wrong-sign"
)

// verdictClass orders the verdicts for ranking: lower is better.
var verdictClass = map[string]int{VerdictSolid: 0, VerdictUsable: 1, VerdictWeak: 2, VerdictSuspect: 3, VerdictWrongSign: 4}

// Defaults of ScreenOptions.
const (
	DefaultMaxSet          = 3
	DefaultMaxCombinations = 200
)

// ScreenOptions tunes Screen. The zero value gives the defaults.
type ScreenOptions struct {
	// MaxSet is the largest number of shifters in one combination; zero
	// means DefaultMaxSet. It is lowered to the number of candidates.
	MaxSet int
	// MaxCombinations refuses screens with more combinations than this;
	// zero means DefaultMaxCombinations.
	MaxCombinations int
	// ExpectSign declares the expected first-stage sign of a candidate, as
	// in Options.ExpectSign (+1 is the default for every candidate).
	ExpectSign map[string]int
	// Level is the confidence level of bands and 1 - Level the size of the
	// J and C tests; zero means the design's level.
	Level float64
	// AR tunes the numerical inversion of the Anderson-Rubin test.
	AR ARSearch
	// Progress, when not nil, is called after each combination with the
	// number done and the total. Calls come from one goroutine at a time,
	// with done increasing.
	Progress func(done, total int)
	// DropLeftOut leaves the candidates that are not in a combination out
	// of its model altogether. By default they stay in the demand
	// equation as controls, so that a candidate that moves demand directly
	// (an invalid shifter) does not bias the combinations that leave it
	// out, and each row tests the exclusion of exactly its own shifters.
	DropLeftOut bool
	// Workers is the number of combinations diagnosed at once; zero means
	// runtime.NumCPU().
	Workers int
}

// ScreenResult is a ranked table of combinations of candidate shifters.
type ScreenResult struct {
	// Outcome and Endogenous name the model's columns; Form is the
	// functional form ("" in general form).
	Outcome    string `json:"outcome"`
	Endogenous string `json:"endogenous"`
	Form       string `json:"form,omitempty"`
	// Controls are the exogenous regressors kept in every combination.
	Controls []string `json:"controls"`
	// FixedEffects and Cluster describe the design.
	FixedEffects []string `json:"fixed_effects"`
	Cluster      []string `json:"cluster"`
	// Candidates are the screened shifters, MaxSet the largest
	// combination and Combinations the number of rows of the table.
	Candidates   []string `json:"candidates"`
	MaxSet       int      `json:"max_set"`
	Combinations int      `json:"combinations"`
	// LeftOut says what happens to the candidates that are not in a
	// combination: "controls" (they stay in the demand equation) or
	// "dropped" (ScreenOptions.DropLeftOut).
	LeftOut string `json:"left_out"`
	// N is the number of rows every combination is estimated on: the
	// rows with every candidate present, so that the combinations are
	// comparable. RowsNote says so in words.
	N        int    `json:"n"`
	RowsNote string `json:"rows_note"`
	// Estimator is always 2SLS; VcovKind and Vcov describe the covariance
	// every statistic uses.
	Estimator string  `json:"estimator"`
	VcovKind  string  `json:"vcov"`
	Vcov      string  `json:"vcov_detail"`
	Level     float64 `json:"level"`
	// ElasticityScale turns the price coefficient into the elasticity (1
	// for log-log demand); elasticities and bands in the rows are scaled
	// by it.
	ElasticityScale float64 `json:"elasticity_scale"`
	// Rule states in words how verdicts are given and rows ranked.
	Rule string `json:"rule"`
	// Rows are the combinations, best first.
	Rows []ScreenRow `json:"rows"`
	// Notes explain choices made for the screen as a whole.
	Notes []string `json:"notes"`
}

// ScreenRow is the evidence on one combination of shifters.
type ScreenRow struct {
	// Rank is the 1-based position in the ranked table.
	Rank     int      `json:"rank"`
	Shifters []string `json:"shifters"`
	// Verdict is one word, given by the first rule that applies (tests at
	// size 1 - level):
	//
	//	wrong-sign  a shifter's first-stage coefficient has the sign opposite
	//	            to the one expected and is significant;
	//	suspect     over-identified and Hansen J rejects; or a difference-in-J
	//	            test that can single out one shifter (two or more
	//	            over-identifying restrictions) rejects; or the
	//	            Anderson-Rubin set is empty (the shifters contradict each
	//	            other); or, in demand form, the whole Wald band of the
	//	            elasticity is above zero (demand rising with price);
	//	weak        the Montiel Olea-Pflueger effective F does not exceed its
	//	            critical value (simplified procedure, 5% level, 10%
	//	            worst-case bias), or the Anderson-Rubin set is unbounded;
	//	usable      none of the above, but a shifter adds nothing detectable
	//	            to the first stage beyond the others, a sign is wrong
	//	            without being significant, or the combination is exactly
	//	            identified (one shifter: its validity cannot be tested);
	//	solid       none of the above: strong, over-identified with J not
	//	            rejected, every sign as expected and every shifter
	//	            pulling its weight.
	//
	// The idea: a flaw that makes the estimate wrong (invalid or
	// contradicting shifters) outranks one that makes it imprecise or
	// biased toward OLS (weak shifters), which outranks a shortfall in the
	// evidence (untestable or idle shifters).
	Verdict string `json:"verdict"`
	// Reasons say in words why the verdict was given (empty for solid).
	Reasons []string `json:"reasons"`
	// Sign summarises the first-stage sign checks: "as expected", or the
	// shifters with a wrong sign. WrongSign lists them, SignificantWrong
	// those whose wrong sign is significant.
	Sign             string   `json:"sign_check"`
	WrongSign        []string `json:"wrong_sign"`
	SignificantWrong []string `json:"significant_wrong_sign"`
	// Idle lists the shifters that add nothing detectable to the first
	// stage beyond the others (combinations of two or more).
	Idle []string `json:"idle"`
	// EffectiveF is the Montiel Olea-Pflueger effective F, Critical its
	// simplified critical value and Strong whether it is exceeded.
	EffectiveF Num  `json:"f_eff"`
	Critical   Num  `json:"f_eff_critical"`
	Strong     bool `json:"strong"`
	// PartialR2 is the share of price variation left after the controls
	// and fixed effects that the shifters explain.
	PartialR2 Num `json:"partial_r2"`
	// JDF is the number of over-identifying restrictions (0 when exactly
	// identified); J and JP are Hansen J (Sargan under iid errors) and its
	// p-value, null when exactly identified. C holds the one-shifter
	// difference-in-J tests; Suspects the shifters whose C rejects.
	JDF      int       `json:"j_df"`
	J        Num       `json:"hansen_j"`
	JP       Num       `json:"hansen_j_p"`
	C        []ScreenC `json:"c_tests"`
	Suspects []string  `json:"c_suspects"`
	// Elasticity is the 2SLS estimate (times ElasticityScale), with its
	// standard error and Wald band at the level.
	Elasticity Num `json:"elasticity"`
	StdError   Num `json:"std_error"`
	WaldLow    Num `json:"wald_low"`
	WaldHigh   Num `json:"wald_high"`
	// AR is the Anderson-Rubin set for the elasticity: its shape in words,
	// its lowest and highest points (null when unbounded) and its pieces.
	ARShape  string     `json:"ar_shape"`
	ARLow    *float64   `json:"ar_low"`
	ARHigh   *float64   `json:"ar_high"`
	ARPieces []Interval `json:"ar_pieces"`
	// ARWidth is the length of the Anderson-Rubin set (+Inf when it is
	// unbounded, NaN when empty), used for ranking.
	ARWidth Num `json:"ar_width"`
	// Diagnostics holds the full evidence of the combination (not
	// encoded; run priceiv estimate with the combination for the
	// report).
	Diagnostics *Diagnostics `json:"-"`
}

// ScreenC is one difference-in-J test of a single shifter within a
// combination.
type ScreenC struct {
	Shifter string `json:"shifter"`
	C       Num    `json:"c"`
	P       Num    `json:"p_value"`
	// Decisive is false when dropping the shifter leaves the model exactly
	// identified: then C equals J and cannot tell which shifter is at
	// fault.
	Decisive bool `json:"decisive"`
}

// ScreenRule states the verdict and ranking rule in words; it is printed
// with every screen.
const ScreenRule = "Verdict, first rule that applies (tests at 1 - level): wrong-sign (a shifter moves price significantly the wrong way); " +
	"suspect (Hansen J rejects, a difference-in-J test singles out a shifter, the Anderson-Rubin set is empty, or the whole elasticity band is above zero); " +
	"weak (effective F not above its critical value, or the Anderson-Rubin set is unbounded); " +
	"usable (a shifter adds nothing beyond the others, a non-significant wrong sign, or a single shifter whose validity cannot be tested); " +
	"solid (none of these). " +
	"Ranking: verdict first, then the narrower Anderson-Rubin set, then the larger effective F relative to its critical value, then fewer shifters."

// TooManyCombinationsError is returned by Screen and CheckCombinations
// when a screen would estimate more combinations than allowed.
type TooManyCombinationsError struct {
	// Candidates and MaxSet describe the screen asked for; Count is its
	// number of combinations (saturated at math.MaxInt64), Limit the
	// allowed number.
	Candidates, MaxSet, Count, Limit int
	// FitSet is the largest MaxSet within Limit for these candidates (0
	// if even single shifters exceed it), FitSetCount its number of
	// combinations; FitCandidates is the largest number of candidates
	// within Limit at this MaxSet.
	FitSet, FitSetCount, FitCandidates int
}

func (e *TooManyCombinationsError) Error() string {
	msg := fmt.Sprintf("supplyshifters: screening %d candidates in combinations of up to %d shifters means %s combinations, more than the limit of %d; narrow the screen: ",
		e.Candidates, e.MaxSet, countText(e.Count), e.Limit)
	return msg + strings.Join(e.Narrowing("the largest combination", "the limit"), ", or ")
}

// Narrowing lists the ways to bring the screen within the limit, naming
// the size option and the limit as the caller calls them.
func (e *TooManyCombinationsError) Narrowing(setName, limitName string) []string {
	var ways []string
	if e.FitCandidates >= 1 {
		ways = append(ways, fmt.Sprintf("give at most %d candidates (drop those you would not defend anyway)", e.FitCandidates))
	}
	if e.FitSet >= 1 && e.FitSet < e.MaxSet {
		ways = append(ways, fmt.Sprintf("lower %s to %d (%d combinations)", setName, e.FitSet, e.FitSetCount))
	}
	ways = append(ways, fmt.Sprintf("raise %s to %s", limitName, countText(e.Count)))
	return ways
}

func countText(n int) string {
	if n == math.MaxInt64 {
		return "more than 9.2e18"
	}
	return fmt.Sprint(n)
}

// CountCombinations returns the number of non-empty combinations of at
// most maxSet out of n candidates,
//
//	Σ_{k=1}^{min(maxSet, n)} C(n, k)
//
// saturated at math.MaxInt64.
func CountCombinations(n, maxSet int) int {
	total := new(big.Int)
	var c big.Int
	for k := 1; k <= min(maxSet, n); k++ {
		total.Add(total, c.Binomial(int64(n), int64(k)))
		if !total.IsInt64() {
			return math.MaxInt64
		}
	}
	return int(total.Int64())
}

// CheckCombinations returns a *TooManyCombinationsError when n candidates
// in combinations of up to maxSet exceed limit (zero values mean the
// defaults), and an error when maxSet or limit is negative or n < 1.
func CheckCombinations(n, maxSet, limit int) error {
	if maxSet == 0 {
		maxSet = DefaultMaxSet
	}
	if limit == 0 {
		limit = DefaultMaxCombinations
	}
	if n < 1 {
		return errors.New("supplyshifters: no candidate shifters to screen: name at least one")
	}
	if maxSet < 1 {
		return fmt.Errorf("supplyshifters: the largest combination is %d shifters: give at least 1", maxSet)
	}
	if limit < 1 {
		return fmt.Errorf("supplyshifters: the limit on combinations is %d: give at least 1", limit)
	}
	count := CountCombinations(n, maxSet)
	if count <= limit {
		return nil
	}
	e := &TooManyCombinationsError{Candidates: n, MaxSet: min(maxSet, n), Count: count, Limit: limit}
	for s := min(maxSet, n); s >= 1; s-- {
		if c := CountCombinations(n, s); c <= limit {
			e.FitSet, e.FitSetCount = s, c
			break
		}
	}
	for k := n - 1; k >= 1; k-- {
		if CountCombinations(k, maxSet) <= limit {
			e.FitCandidates = k
			break
		}
	}
	return e
}

// Combinations returns the combinations of 1 to maxSet of the indices
// 0..n-1: by size, then in lexicographic order.
func Combinations(n, maxSet int) [][]int {
	var out [][]int
	for k := 1; k <= min(maxSet, n); k++ {
		idx := make([]int, k)
		for i := range idx {
			idx[i] = i
		}
		for {
			out = append(out, append([]int(nil), idx...))
			i := k - 1
			for i >= 0 && idx[i] == n-k+i {
				i--
			}
			if i < 0 {
				break
			}
			idx[i]++
			for j := i + 1; j < k; j++ {
				idx[j] = idx[j-1] + 1
			}
		}
	}
	return out
}

// Screen estimates the demand design d with every combination of 1 to
// opts.MaxSet of the candidate shifters and ranks the combinations.
//
// d must be one design built with every candidate as a shifter (excluded
// instrument) and one endogenous regressor: all combinations then use the
// same rows (those with every candidate present) and the same moment
// blocks, so that they are comparable and each costs no pass over the
// rows (except HC1 scores). Candidates nil means every shifter of d;
// shifters of d that are not candidates are left out of every
// combination. Each combination is fitted by 2SLS with d's covariance kind
// and diagnosed by DiagnoseModel (first stage, weak instruments,
// over-identification, Anderson-Rubin); the verdict rule is documented on
// ScreenRow.Verdict and in ScreenRule.
//
// Screen returns a *TooManyCombinationsError when the screen exceeds
// opts.MaxCombinations, and an error naming the column when a candidate
// is not a shifter of d or a combination cannot be estimated (a shifter
// constant within the fixed effects, collinear shifters).
func Screen(d *demand.Design, candidates []string, opts ScreenOptions) (*ScreenResult, error) {
	if d == nil {
		panic("supplyshifters: Screen needs a design")
	}
	md := d.Model
	if len(md.Endog) != 1 {
		return nil, fmt.Errorf("supplyshifters: the screen compares elasticities of one endogenous regressor (price); this model has %d: state one price column", len(md.Endog))
	}
	m := d.Moments
	inst := map[string]int{}
	var instNames []string
	for _, j := range md.Instr {
		inst[m.Names[j]] = j
		instNames = append(instNames, m.Names[j])
	}
	if candidates == nil {
		candidates = instNames
	}
	seen := map[string]bool{}
	var unknown []string
	cols := make([]int, 0, len(candidates))
	for _, c := range candidates {
		if seen[c] {
			return nil, fmt.Errorf("supplyshifters: candidate %q is named twice: name each candidate once", c)
		}
		seen[c] = true
		j, ok := inst[c]
		if !ok {
			u := fmt.Sprintf("%q", c)
			if cl := demand.CloseNames(c, instNames, 3); len(cl) > 0 {
				u += " (closest: " + strings.Join(cl, ", ") + ")"
			}
			unknown = append(unknown, u)
			continue
		}
		cols = append(cols, j)
	}
	if len(unknown) > 0 {
		return nil, fmt.Errorf("supplyshifters: candidate(s) %s are not shifters of the design (shifters: %s): build the design with every candidate as a shifter",
			strings.Join(unknown, ", "), strings.Join(instNames, ", "))
	}
	maxSet, limit := opts.MaxSet, opts.MaxCombinations
	if maxSet == 0 {
		maxSet = DefaultMaxSet
	}
	if limit == 0 {
		limit = DefaultMaxCombinations
	}
	if err := CheckCombinations(len(cols), maxSet, limit); err != nil {
		return nil, err
	}
	maxSet = min(maxSet, len(cols))
	_, vk, err := d.Defaults()
	if err != nil {
		return nil, err
	}
	// Every candidate enters every model (as a shifter or as a control),
	// so each must vary after the fixed effects and none may be a
	// combination of the others: check once, naming the column, before
	// any combination fails for a column it does not even screen.
	all := md
	all.Instr = cols
	if _, err := ivcore.Estimate(m, all, ivcore.TSLS, ivcore.IID); err != nil {
		return nil, fmt.Errorf("supplyshifters: the candidates cannot be screened together: %w", err)
	}
	level := opts.Level
	if level == 0 {
		level = d.Level
	}
	if level == 0 {
		level = 0.95
	}
	scale := d.ElasticityScale()
	if !(scale != 0) || math.IsInf(scale, 0) {
		scale = 1
	}

	combos := Combinations(len(cols), maxSet)
	res := &ScreenResult{
		Outcome: m.Names[md.Y], Endogenous: m.Names[md.Endog[0]], Form: d.Form,
		Candidates: append([]string(nil), candidates...), MaxSet: maxSet, Combinations: len(combos),
		N: d.N, Estimator: ivcore.TSLS.String(), VcovKind: vk.String(), Level: level,
		ElasticityScale: scale, Rule: ScreenRule, Rows: make([]ScreenRow, len(combos)),
		Controls: []string{}, FixedEffects: []string{}, Cluster: []string{}, Notes: []string{},
	}
	for _, j := range md.Exog {
		res.Controls = append(res.Controls, m.Names[j])
	}
	if d.Spec != nil {
		res.FixedEffects = append(res.FixedEffects, d.Spec.FE...)
	}
	res.Cluster = append(res.Cluster, d.ClusterNames...)
	res.RowsNote = rowsNote(d, candidates)
	res.LeftOut = "controls"
	if opts.DropLeftOut {
		res.LeftOut = "dropped"
	}
	if len(md.Instr) > len(cols) {
		var left []string
		for _, n := range instNames {
			if !seen[n] {
				left = append(left, n)
			}
		}
		res.Notes = append(res.Notes, fmt.Sprintf("Shifters of the design that are not candidates are left out of every combination: %s.", strings.Join(left, ", ")))
	}
	if scale != 1 {
		res.Notes = append(res.Notes, fmt.Sprintf("Elasticities and bands are the price coefficient times %s (the %s form at the mean price and quantity).", fmtG(scale), d.Form))
	}

	dopts := Options{ExpectSign: opts.ExpectSign, ARNulls: []float64{}, AR: opts.AR, Level: level,
		Parts: PartFirstStage | PartWeakIV | PartOverid | PartAndersonRubin}
	errs := make([]error, len(combos))
	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	workers = max(1, min(workers, len(combos)))
	var mu sync.Mutex
	done := 0
	next := make(chan int)
	var wg sync.WaitGroup
	for w := 0; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				sub := md
				sub.Instr = make([]int, len(combos[i]))
				in := make([]bool, len(cols))
				for a, k := range combos[i] {
					sub.Instr[a] = cols[k]
					in[k] = true
				}
				if !opts.DropLeftOut {
					sub.Exog = append([]int(nil), md.Exog...)
					for k, j := range cols {
						if !in[k] {
							sub.Exog = append(sub.Exog, j)
						}
					}
				}
				dg, err := DiagnoseModel(m, sub, vk, nil, dopts)
				if err != nil {
					errs[i] = err
				} else {
					res.Rows[i] = screenRow(dg, scale, level, d.Form != "")
				}
				mu.Lock()
				done++
				if opts.Progress != nil {
					opts.Progress(done, len(combos))
				}
				mu.Unlock()
			}
		}()
	}
	for i := range combos {
		next <- i
	}
	close(next)
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			names := make([]string, len(combos[i]))
			for a, k := range combos[i] {
				names[a] = candidates[k]
			}
			return nil, fmt.Errorf("supplyshifters: screening {%s}: %w", strings.Join(names, ", "), err)
		}
	}
	for _, r := range res.Rows {
		if r.Diagnostics != nil && r.Diagnostics.Vcov != "" {
			res.Vcov = r.Diagnostics.Vcov
			break
		}
	}
	RankScreen(res.Rows)
	return res, nil
}

// rowsNote says which rows every combination uses.
func rowsNote(d *demand.Design, candidates []string) string {
	isCand := map[string]bool{}
	for _, c := range candidates {
		isCand[c] = true
	}
	missing := 0
	for _, dr := range d.Dropped {
		if dr.Reason == "missing value" && isCand[dr.Column] {
			missing += dr.Rows
		}
	}
	s := fmt.Sprintf("Every combination is estimated on the same %d rows, those with all %d candidates present, so that the combinations are comparable", d.N, len(candidates))
	if missing > 0 {
		s += fmt.Sprintf("; %d row(s) were left out for a missing candidate value (a combination estimated alone could use more)", missing)
	}
	return s + "."
}

// screenRow reads one combination's diagnostics into a row with its
// verdict.
func screenRow(dg *Diagnostics, scale, level float64, demandForm bool) ScreenRow {
	alpha := 1 - level
	nan := Num(math.NaN())
	r := ScreenRow{Shifters: dg.Shifters, Reasons: []string{}, WrongSign: []string{}, SignificantWrong: []string{},
		Idle: []string{}, C: []ScreenC{}, Suspects: []string{}, ARPieces: []Interval{},
		EffectiveF: nan, Critical: nan, PartialR2: nan, J: nan, JP: nan, ARWidth: nan, ARShape: ShapeNone,
		Diagnostics: dg}

	// First stage: signs and shifters pulling their weight.
	if len(dg.FirstStage) > 0 {
		fs := dg.FirstStage[0]
		r.PartialR2 = fs.PartialR2
		for _, e := range fs.Shifters {
			p := float64(e.P)
			if e.SignCheck == SignWrong {
				r.WrongSign = append(r.WrongSign, e.Name)
				if p < alpha {
					r.SignificantWrong = append(r.SignificantWrong, e.Name)
				}
			}
			if len(fs.Shifters) > 1 && !(p < alpha) {
				r.Idle = append(r.Idle, e.Name)
			}
		}
	}
	switch {
	case len(r.WrongSign) == 0:
		r.Sign = SignAsExpected
	default:
		var parts []string
		for _, s := range r.WrongSign {
			if contains(r.SignificantWrong, s) {
				parts = append(parts, s)
			} else {
				parts = append(parts, s+" (n.s.)")
			}
		}
		r.Sign = "wrong: " + strings.Join(parts, ", ")
	}

	// Strength.
	if w := dg.WeakIV; w != nil && w.Effective != nil {
		r.EffectiveF, r.Critical, r.Strong = w.Effective.F, w.Effective.Critical, w.Effective.Strong
	}

	// Validity.
	if o := dg.Overid; o != nil {
		r.JDF = max(o.DF, 0)
		if o.Available {
			st := o.HansenJ
			if st == nil || !st.Value.Finite() {
				st = o.Sargan
			}
			if st != nil {
				r.J, r.JP = st.Value, st.P
			}
			for _, c := range o.C {
				if len(c.Shifters) != 1 || !c.Available {
					continue
				}
				sc := ScreenC{Shifter: c.Shifters[0], C: c.Value, P: c.P, Decisive: o.DF > 1}
				r.C = append(r.C, sc)
			}
			// Suspects: decisive C tests that reject, largest C first.
			byC := append([]ScreenC(nil), r.C...)
			sort.SliceStable(byC, func(i, j int) bool { return byC[i].C > byC[j].C })
			for _, sc := range byC {
				if sc.Decisive && float64(sc.P) < alpha {
					r.Suspects = append(r.Suspects, sc.Shifter)
				}
			}
		}
	}

	// Estimate and bands, scaled to the elasticity.
	lo, hi := math.NaN(), math.NaN()
	if a := dg.AndersonRubin; a != nil {
		lo, hi = float64(a.WaldLow), float64(a.WaldHigh)
	}
	r.Elasticity, r.StdError = Num(scale*float64(dg.Estimate)), Num(math.Abs(scale)*float64(dg.StdError))
	r.WaldLow, r.WaldHigh = Num(scale*lo), Num(scale*hi)
	if scale < 0 {
		r.WaldLow, r.WaldHigh = r.WaldHigh, r.WaldLow
	}
	if a := dg.AndersonRubin; a != nil && a.Available {
		r.ARShape = a.Shape
		r.ARPieces = scalePieces(a.Pieces, scale)
		if len(r.ARPieces) > 0 {
			r.ARLow, r.ARHigh = r.ARPieces[0].Low, r.ARPieces[len(r.ARPieces)-1].High
		}
		switch a.Shape {
		case ShapeBounded:
			r.ARWidth = Num(*r.ARHigh - *r.ARLow)
		case ShapeEmpty:
			r.ARWidth = nan
		default:
			r.ARWidth = Num(math.Inf(1))
		}
	}
	r.Verdict, r.Reasons = verdict(&r, level, demandForm)
	return r
}

// verdict applies the rule documented on ScreenRow.Verdict.
func verdict(r *ScreenRow, level float64, demandForm bool) (string, []string) {
	alpha := 1 - level
	lvl := pct(level)
	reasons := []string{}
	v := VerdictSolid
	demote := func(to string) {
		if verdictClass[to] > verdictClass[v] {
			v = to
		}
	}
	if len(r.SignificantWrong) > 0 {
		demote(VerdictWrongSign)
		reasons = append(reasons, fmt.Sprintf("%s moves price significantly the wrong way: a data error or a shifter that stands for demand", strings.Join(r.SignificantWrong, ", ")))
	}
	jRejects := r.JDF > 0 && float64(r.JP) < alpha
	if jRejects {
		demote(VerdictSuspect)
		reasons = append(reasons, fmt.Sprintf("Hansen J rejects (%s): the shifters point to different elasticities", fmtP(float64(r.JP))))
	}
	if len(r.Suspects) > 0 {
		demote(VerdictSuspect)
		var parts []string
		for _, name := range r.Suspects {
			for _, c := range r.C {
				if c.Shifter == name {
					parts = append(parts, fmt.Sprintf("%s (C = %s, %s)", name, fmtG(float64(c.C)), fmtP(float64(c.P))))
				}
			}
		}
		s := "difference-in-J points at " + strings.Join(parts, ", then ")
		if !jRejects {
			s += ", although J as a whole does not reject"
		}
		reasons = append(reasons, s)
	}
	if demandForm && float64(r.WaldLow) > 0 {
		demote(VerdictSuspect)
		reasons = append(reasons, fmt.Sprintf("the whole %s band of the elasticity is above zero: demand would rise with price, so a shifter probably moves demand as well", lvl))
	}
	if r.ARShape == ShapeEmpty {
		demote(VerdictSuspect)
		reasons = append(reasons, fmt.Sprintf("the %s Anderson-Rubin set is empty: no elasticity reconciles the shifters", lvl))
	}
	if !r.Strong {
		demote(VerdictWeak)
		if r.EffectiveF.Finite() {
			reasons = append(reasons, fmt.Sprintf("effective F %s is not above its critical value %s", fmtG(float64(r.EffectiveF)), fmtG(float64(r.Critical))))
		} else {
			reasons = append(reasons, "the effective F is undefined")
		}
	}
	switch r.ARShape {
	case ShapeTwoRays, ShapeWholeLine, ShapeRay, ShapeSeveral:
		demote(VerdictWeak)
		reasons = append(reasons, fmt.Sprintf("the %s Anderson-Rubin set is unbounded (%s)", lvl, r.ARShape))
	}
	if len(r.Idle) > 0 {
		demote(VerdictUsable)
		reasons = append(reasons, fmt.Sprintf("%s adds nothing detectable beyond the other shifters (first-stage p ≥ %s)", strings.Join(r.Idle, ", "), fmtG(alpha)))
	}
	if wrongNS := len(r.WrongSign) - len(r.SignificantWrong); wrongNS > 0 {
		demote(VerdictUsable)
		var ns []string
		for _, s := range r.WrongSign {
			if !contains(r.SignificantWrong, s) {
				ns = append(ns, s)
			}
		}
		reasons = append(reasons, fmt.Sprintf("%s has the wrong sign, though not significantly", strings.Join(ns, ", ")))
	}
	if r.JDF == 0 {
		demote(VerdictUsable)
		reasons = append(reasons, "one shifter: its validity cannot be tested, only argued")
	}
	return v, reasons
}

// RankScreen sorts rows by the rule of ScreenRule (verdict, narrower
// Anderson-Rubin set, larger effective F relative to its critical value,
// fewer shifters, then names) and numbers them.
func RankScreen(rows []ScreenRow) {
	ratio := func(r *ScreenRow) float64 {
		x := float64(r.EffectiveF) / float64(r.Critical)
		if math.IsNaN(x) {
			return math.Inf(-1)
		}
		return x
	}
	width := func(r *ScreenRow) float64 {
		w := float64(r.ARWidth)
		if math.IsNaN(w) {
			return math.Inf(1)
		}
		return w
	}
	sort.SliceStable(rows, func(i, j int) bool {
		a, b := &rows[i], &rows[j]
		if ca, cb := verdictClass[a.Verdict], verdictClass[b.Verdict]; ca != cb {
			return ca < cb
		}
		if wa, wb := width(a), width(b); wa != wb {
			return wa < wb
		}
		if ra, rb := ratio(a), ratio(b); ra != rb {
			return ra > rb
		}
		if len(a.Shifters) != len(b.Shifters) {
			return len(a.Shifters) < len(b.Shifters)
		}
		return strings.Join(a.Shifters, ",") < strings.Join(b.Shifters, ",")
	})
	for i := range rows {
		rows[i].Rank = i + 1
	}
}

// scalePieces multiplies the pieces of a set by s (reversing their order
// when s < 0).
func scalePieces(p []Interval, s float64) []Interval {
	out := make([]Interval, len(p))
	for i, iv := range p {
		lo, hi := scaleEnd(iv.Low, s), scaleEnd(iv.High, s)
		if s < 0 {
			lo, hi = hi, lo
		}
		out[i] = Interval{Low: lo, High: hi}
	}
	if s < 0 {
		for i, j := 0, len(out)-1; i < j; i, j = i+1, j-1 {
			out[i], out[j] = out[j], out[i]
		}
	}
	return out
}

func scaleEnd(x *float64, s float64) *float64 {
	if x == nil {
		return nil
	}
	return ptr(*x * s)
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}
