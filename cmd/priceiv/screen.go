package main

import (
	"errors"
	"fmt"
	"io"
	"math"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/elasticity"
	"priceiv/supplyshifters"
)

// demoCandidates are the demo market's candidate shifters, the invalid
// temperature among them.
var demoCandidates = []string{demo.ColBean, demo.ColFreight, demo.ColBottle, demo.ColLabel, demo.ColTemperature}

func newScreenCmd() *cobra.Command {
	var mf modelFlags
	var format, out string
	var useDemo, dropLeftOut bool
	var candidates []string
	var maxSet, maxComb int
	cmd := &cobra.Command{
		Use:   "screen [PANEL.csv] --candidates a,b,c --quantity Q --price P [flags]",
		Short: "Rank candidate cost shifters and their combinations as instruments for price",
		Long: `Screen estimates the demand model with each candidate shifter alone and
with every combination of up to --max-set of them, by 2SLS on the same rows,
and ranks the combinations: first-stage signs, effective F against its
critical value, partial R², Hansen J, the elasticity with its Wald band,
the Anderson-Rubin band, and a one-word verdict (solid, usable, weak,
suspect, wrong-sign) whose rule is printed with the table.

Candidates that are not in a combination stay in its demand equation as
controls (--drop-left-out leaves them out instead), so that a candidate
that moves demand directly does not spoil the combinations without it.`,
		Example: `  # the built-in cold-brew market: bean, freight, bottle and label cost
  # indices and the local temperature (which also moves demand)
  priceiv screen --demo

  # your own panel, up to two shifters at a time, clustered by store
  priceiv screen coldbrew_panel.csv --quantity units --price price \
      --candidates bean_index,freight_index,label_index,temperature \
      --controls promo --fe 'product*store' --cluster store --max-set 2

  # a subsidy index that lowers price, the table as CSV for a spreadsheet
  priceiv screen coldbrew_panel.csv --quantity units --price price \
      --candidates bean_index,freight_index,glass_rebate --expect-sign glass_rebate=- \
      --fe store --cluster store --format csv --out screen.csv`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cmd.SilenceUsage = true
			if err := elasticity.CheckFormat(format); err != nil {
				return err
			}
			flags := cmd.Flags()
			for _, other := range []string{"shifters", "instruments"} {
				if flags.Changed("candidates") && flags.Changed(other) {
					return fmt.Errorf("--candidates replaces --%s in a screen: give the shifters to compare once, as --candidates", other)
				}
			}
			for _, f := range []string{"by", "interact", "cross"} {
				if flags.Changed(f) {
					return fmt.Errorf("--%s is not available in a screen: the screen compares shifters on the pooled model; run priceiv estimate --%s with the combination you choose", f, f)
				}
			}
			if flags.Changed("candidates") {
				if err := checkScreenSize(len(candidates), maxSet, maxComb); err != nil {
					return err
				}
			}
			spec, panel, err := loadInputs(cmd, &mf, args, useDemo)
			if err != nil {
				return err
			}
			if spec.By != "" || spec.Interact != "" || spec.Cross {
				return fmt.Errorf("the spec asks for a per-product or cross-price design, but the screen compares shifters on the pooled model: remove by, interact and cross from the spec")
			}
			var notes []string
			cands := candidates
			switch {
			case flags.Changed("candidates"):
			case useDemo && !flags.Changed("shifters") && mf.spec == "":
				cands = demoCandidates
			case spec.DemandForm():
				cands = spec.Shifters
			default:
				cands = spec.Instruments
			}
			cands, err = cleanCandidates(cands)
			if err != nil {
				return err
			}
			if err := checkScreenSize(len(cands), maxSet, maxComb); err != nil {
				return err
			}
			p, drops, err := demand.Prepare(panel, spec)
			if err != nil {
				return err
			}
			if err := checkCandidateColumns(p, cands); err != nil {
				return err
			}
			controls := &spec.Controls
			if !spec.DemandForm() {
				controls = &spec.Exogenous
			}
			if useDemo && !flags.Changed("controls") && mf.spec == "" {
				var moved []string
				*controls, moved = without(*controls, cands)
				if len(moved) > 0 {
					notes = append(notes, fmt.Sprintf("%s moved from the demo model's controls to the candidates.", strings.Join(moved, ", ")))
				}
			}
			if _, both := without(*controls, cands); len(both) > 0 {
				return fmt.Errorf("%s is both a control and a candidate shifter: a column is either held fixed or used as a shifter; remove it from --controls (candidates left out of a combination stay in as controls anyway)", quoted(both))
			}
			if spec.DemandForm() {
				spec.Shifters = cands
			} else {
				spec.Instruments = cands
			}
			signs, err := spec.ExpectedSigns()
			if err != nil {
				return err
			}
			if err := checkSignNames(signs, cands); err != nil {
				return err
			}
			if e := strings.ToLower(spec.Estimator); e != "" && e != "2sls" && e != "tsls" {
				notes = append(notes, fmt.Sprintf("The screen fits 2SLS for every combination; the estimator %q of the spec applies to priceiv estimate.", spec.Estimator))
			}
			d, err := demand.Build(p, spec, 0)
			if err != nil {
				return err
			}
			d.Dropped = append(drops, d.Dropped...)
			tick, finish := lateProgress("screening shifters")
			res, err := supplyshifters.Screen(d, cands, supplyshifters.ScreenOptions{
				MaxSet: maxSet, MaxCombinations: maxComb, ExpectSign: signs, Level: d.Level,
				DropLeftOut: dropLeftOut, Progress: tick,
			})
			finish()
			if err != nil {
				var tm *supplyshifters.TooManyCombinationsError
				if errors.As(err, &tm) {
					return tooManyMessage(tm)
				}
				return err
			}
			res.Notes = append(notes, res.Notes...)
			return emit(cmd, out, func(w io.Writer) error { return elasticity.WriteScreen(w, res, format) })
		},
	}
	mf.register(cmd.Flags())
	cmd.Flags().StringSliceVar(&candidates, "candidates", nil, "candidate cost shifters to screen, comma-separated (replaces --shifters)")
	cmd.Flags().IntVar(&maxSet, "max-set", supplyshifters.DefaultMaxSet, "largest number of shifters in one combination")
	cmd.Flags().IntVar(&maxComb, "max-combinations", supplyshifters.DefaultMaxCombinations, "refuse screens with more combinations than this")
	cmd.Flags().BoolVar(&dropLeftOut, "drop-left-out", false, "leave candidates outside a combination out of its model (default: they stay in as controls)")
	cmd.Flags().BoolVar(&useDemo, "demo", false, "screen the built-in cold-brew market's candidate shifters (generated in memory, fixed seed)")
	cmd.Flags().StringVar(&format, "format", "text", "output format: text, json, csv or markdown")
	cmd.Flags().StringVar(&out, "out", "", "write the output to this file (written only when the run succeeds)")
	cmd.MarkFlagsMutuallyExclusive("demo", "data")
	return cmd
}

// checkScreenSize refuses a screen with more combinations than allowed,
// in the command's own words.
func checkScreenSize(n, maxSet, limit int) error {
	if n == 0 {
		return nil // reported by cleanCandidates
	}
	if maxSet < 1 {
		return fmt.Errorf("--max-set %d: a combination holds at least one shifter; give 1 or more", maxSet)
	}
	if limit < 1 {
		return fmt.Errorf("--max-combinations %d: give 1 or more", limit)
	}
	err := supplyshifters.CheckCombinations(n, maxSet, limit)
	var tm *supplyshifters.TooManyCombinationsError
	if errors.As(err, &tm) {
		return tooManyMessage(tm)
	}
	return err
}

func tooManyMessage(tm *supplyshifters.TooManyCombinationsError) error {
	count := fmt.Sprint(tm.Count)
	if tm.Count == math.MaxInt64 {
		count = "more than 9.2e18"
	}
	return fmt.Errorf("screening %d candidates in combinations of up to %d (--max-set) means %s combinations, more than --max-combinations %d; narrow the screen: %s",
		tm.Candidates, tm.MaxSet, count, tm.Limit, strings.Join(tm.Narrowing("--max-set", "--max-combinations"), ", or "))
}

// cleanCandidates trims the names and refuses an empty or repeated list.
func cleanCandidates(c []string) ([]string, error) {
	var out []string
	seen := map[string]bool{}
	for _, s := range c {
		s = strings.TrimSpace(s)
		if s == "" {
			continue
		}
		if seen[s] {
			return nil, fmt.Errorf("candidate %q is named twice in --candidates: name each once", s)
		}
		seen[s] = true
		out = append(out, s)
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("no candidate shifters to screen: give them as --candidates a,b,c (or try priceiv screen --demo)")
	}
	return out, nil
}

// checkCandidateColumns names every candidate that is not a column of the
// panel, each with the closest names that are.
func checkCandidateColumns(p *demand.Panel, cands []string) error {
	var bad []string
	for _, c := range cands {
		if p.Has(c) {
			continue
		}
		s := fmt.Sprintf("%q", c)
		if cl := demand.CloseNames(c, p.Columns, 3); len(cl) > 0 {
			s += " (closest: " + strings.Join(cl, ", ") + ")"
		} else {
			s += " (no close name)"
		}
		bad = append(bad, s)
	}
	if len(bad) == 0 {
		return nil
	}
	what := "a candidate is not a column"
	if len(bad) > 1 {
		what = fmt.Sprintf("%d candidates are not columns", len(bad))
	}
	return fmt.Errorf("%s: %s: %s; fix the names in --candidates (%d columns in all; priceiv columns FILE lists them)",
		p.Source, what, strings.Join(bad, "; "), len(p.Columns))
}

// checkSignNames refuses --expect-sign entries that name no candidate.
func checkSignNames(signs map[string]int, cands []string) error {
	for key := range signs {
		name, _, _ := strings.Cut(key, "@")
		found := false
		for _, c := range cands {
			found = found || c == name
		}
		if !found {
			msg := fmt.Sprintf("--expect-sign names %q, which is not a candidate (candidates: %s)", name, strings.Join(cands, ", "))
			if cl := demand.CloseNames(name, cands, 1); len(cl) > 0 {
				msg += fmt.Sprintf("; did you mean %s?", cl[0])
			}
			return errors.New(msg)
		}
	}
	return nil
}

// without returns list without the names in drop, and the names removed.
func without(list, drop []string) (kept, removed []string) {
	d := map[string]bool{}
	for _, s := range drop {
		d[s] = true
	}
	kept = []string{}
	for _, s := range list {
		if d[s] {
			removed = append(removed, s)
		} else {
			kept = append(kept, s)
		}
	}
	return kept, removed
}

func quoted(list []string) string {
	q := make([]string, len(list))
	for i, s := range list {
		q[i] = fmt.Sprintf("%q", s)
	}
	return strings.Join(q, ", ")
}

// lateProgress returns a progress callback that draws a bar on standard
// error only once the work has taken more than half a second (and only
// when standard error is a terminal, as progress does), and a function to
// call when the work is done.
func lateProgress(what string) (func(done, total int), func()) {
	start := time.Now()
	var tick func(int)
	finish := func() {}
	shown := false
	return func(done, total int) {
			if !shown {
				if time.Since(start) < 500*time.Millisecond {
					return
				}
				shown = true
				tick, finish = progress(total, what)
			}
			if tick != nil {
				tick(done)
			}
		}, func() {
			finish()
		}
}
