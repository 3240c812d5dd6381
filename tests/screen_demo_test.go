package tests

import (
	"bytes"
	"math"
	"slices"
	"strings"
	"testing"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/elasticity"
	"priceiv/supplyshifters"
)

// screenDemoCandidates are the demo market's candidate shifters: the
// suggested model's shifters, the bottle and label indices, and the
// temperature moved from the controls into the candidates.
var screenDemoCandidates = []string{demo.ColBean, demo.ColFreight, demo.ColBottle, demo.ColLabel, demo.ColTemperature}

// screenDemo builds the demo market's suggested model (Truth.SuggestedModel)
// with temperature moved from the controls into the candidates, and
// screens the candidates up to three at a time.
func screenDemo(tb testing.TB) (*demo.Market, *demand.Design, *supplyshifters.ScreenResult) {
	tb.Helper()
	m, err := demo.Generate(demo.DefaultConfig())
	if err != nil {
		tb.Fatal(err)
	}
	sm := m.Truth.SuggestedModel
	spec := &demand.Spec{Quantity: sm.Quantity, Price: sm.Price, Form: sm.Form, Cluster: sm.Cluster, Shifters: screenDemoCandidates}
	for _, c := range sm.Controls {
		if !slices.Contains(screenDemoCandidates, c) {
			spec.Controls = append(spec.Controls, c)
		}
	}
	for _, fe := range sm.FixedEffects {
		spec.FE = append(spec.FE, strings.Join(fe, "*"))
	}
	d, err := demand.Build(m.Panel, spec, 0)
	if err != nil {
		tb.Fatal(err)
	}
	res, err := supplyshifters.Screen(d, screenDemoCandidates, supplyshifters.ScreenOptions{})
	if err != nil {
		tb.Fatal(err)
	}
	return m, d, res
}

func screenRow(t *testing.T, res *supplyshifters.ScreenResult, shifters ...string) *supplyshifters.ScreenRow {
	t.Helper()
	for i := range res.Rows {
		if slices.Equal(res.Rows[i].Shifters, shifters) {
			return &res.Rows[i]
		}
	}
	t.Fatalf("no screened combination %v", shifters)
	return nil
}

// TestScreenDemoMarket screens the demo market's five candidate shifters
// (basis: generated truth, demo market, Truth.Shifters) and checks that
// the screen tells them apart as the truth says it should:
//
//   - the invalid shifter (temperature, Valid = false: it moves demand
//     directly) is caught by the J/C tests whenever it is paired with the
//     strong valid shifters: Hansen J p < 0.05, and in the three-shifter
//     combination its difference-in-J statistic rejects and is the largest;
//     every combination holding it is flagged;
//   - the weak shifter (label index, Strength = "weak") alone has an
//     effective F below its critical value and the verdict weak;
//   - the strong and moderate valid shifters (bean and freight indices)
//     pass alone and together: effective F above its critical value, every
//     sign as expected, and together Hansen J not rejected, verdict solid,
//     with a band that covers the pooled target of the truth.
func TestScreenDemoMarket(t *testing.T) {
	m, d, res := screenDemo(t)
	if res.Combinations != 25 || len(res.Rows) != 25 {
		t.Fatalf("%d combinations, want 5 + 10 + 10 = 25", res.Combinations)
	}
	if res.N != d.N {
		t.Errorf("screen on %d rows, design has %d", res.N, d.N)
	}
	truth := map[string]demo.ShifterTruth{}
	for _, s := range m.Truth.Shifters {
		truth[s.Column] = s
	}
	var valid, strong []string
	for _, c := range screenDemoCandidates {
		s, ok := truth[c]
		if !ok {
			t.Fatalf("no truth for candidate %s", c)
		}
		if s.Valid && (s.Strength == "strong" || s.Strength == "moderate") {
			strong = append(strong, c)
		}
		if s.Valid {
			valid = append(valid, c)
		}
	}
	if !slices.Equal(strong, []string{demo.ColBean, demo.ColFreight}) || slices.Contains(valid, demo.ColTemperature) || truth[demo.ColLabel].Strength != "weak" {
		t.Fatalf("the demo truth changed: strong valid %v, valid %v, label %q", strong, valid, truth[demo.ColLabel].Strength)
	}

	// Generated truth: temperature is invalid.
	for _, set := range [][]string{{demo.ColBean, demo.ColTemperature}, {demo.ColFreight, demo.ColTemperature}, {demo.ColBean, demo.ColFreight, demo.ColTemperature}} {
		r := screenRow(t, res, set...)
		t.Logf("%v: Hansen J %.3f (p %.2g), verdict %s", set, float64(r.J), float64(r.JP), r.Verdict)
		if !(float64(r.JP) < 0.05) || r.Verdict != supplyshifters.VerdictSuspect {
			t.Errorf("%v: J p = %g, verdict %s; the invalid temperature should be caught", set, float64(r.JP), r.Verdict)
		}
	}
	r3 := screenRow(t, res, demo.ColBean, demo.ColFreight, demo.ColTemperature)
	var cTemp, cMax float64
	for _, c := range r3.C {
		cMax = math.Max(cMax, float64(c.C))
		if c.Shifter == demo.ColTemperature {
			cTemp = float64(c.C)
			if !c.Decisive || !(float64(c.P) < 0.05) {
				t.Errorf("C test of temperature: %g (p %g, decisive %v), should reject", float64(c.C), float64(c.P), c.Decisive)
			}
		}
	}
	if cTemp != cMax || len(r3.Suspects) == 0 || r3.Suspects[0] != demo.ColTemperature {
		t.Errorf("difference-in-J should point first at temperature: C tests %+v, suspects %v", r3.C, r3.Suspects)
	}
	for _, r := range res.Rows {
		if slices.Contains(r.Shifters, demo.ColTemperature) && r.Verdict != supplyshifters.VerdictSuspect {
			t.Errorf("%v holds temperature but is %s", r.Shifters, r.Verdict)
		}
	}

	// Generated truth: the label index is weak.
	rl := screenRow(t, res, demo.ColLabel)
	t.Logf("label_index: effective F %.3f, critical %.3f", float64(rl.EffectiveF), float64(rl.Critical))
	if rl.Strong || !(float64(rl.EffectiveF) < float64(rl.Critical)) || rl.Verdict != supplyshifters.VerdictWeak {
		t.Errorf("label_index: effective F %g vs critical %g, verdict %s; should be weak", float64(rl.EffectiveF), float64(rl.Critical), rl.Verdict)
	}

	// Generated truth: the bean and freight indices are valid and strong.
	for _, set := range [][]string{{demo.ColBean}, {demo.ColFreight}, {demo.ColBean, demo.ColFreight}} {
		r := screenRow(t, res, set...)
		t.Logf("%v: effective F %.1f (critical %.2f), J p %.3f, elasticity %.3f [%.3f, %.3f], verdict %s", set,
			float64(r.EffectiveF), float64(r.Critical), float64(r.JP), float64(r.Elasticity), float64(r.WaldLow), float64(r.WaldHigh), r.Verdict)
		if !r.Strong || r.Sign != supplyshifters.SignAsExpected {
			t.Errorf("%v: strong %v, sign %q", set, r.Strong, r.Sign)
		}
		if r.Verdict != supplyshifters.VerdictSolid && r.Verdict != supplyshifters.VerdictUsable {
			t.Errorf("%v: verdict %s (%v)", set, r.Verdict, r.Reasons)
		}
	}
	rbf := screenRow(t, res, demo.ColBean, demo.ColFreight)
	if !(float64(rbf.JP) >= 0.05) || rbf.Verdict != supplyshifters.VerdictSolid || rbf.Rank != 1 {
		t.Errorf("{bean, freight}: J p %g, verdict %s, rank %d; want J not rejected, solid, first", float64(rbf.JP), rbf.Verdict, rbf.Rank)
	}
	t.Logf("pooled target of the truth: %.3f (defined: %v)", m.Truth.Pooled.OwnElasticity, m.Truth.Pooled.Defined)
	if !m.Truth.Pooled.Defined {
		t.Errorf("the demo truth has no pooled target")
	}
	if target := m.Truth.Pooled.OwnElasticity; m.Truth.Pooled.Defined && (target < float64(rbf.WaldLow) || target > float64(rbf.WaldHigh)) {
		t.Errorf("{bean, freight}: band [%g, %g] misses the pooled target %g", float64(rbf.WaldLow), float64(rbf.WaldHigh), target)
	}

	// Every format writes.
	for _, f := range []string{"text", "json", "csv", "markdown"} {
		var b bytes.Buffer
		if err := elasticity.WriteScreen(&b, res, f); err != nil {
			t.Errorf("%s: %v", f, err)
		}
		if !strings.Contains(b.String(), "bean_index") {
			t.Errorf("%s output lacks the candidates", f)
		}
	}
}

// BenchmarkScreenDemo screens the demo market's five candidates up to
// three at a time (25 combinations) from the moment blocks of one design;
// the target is well under a second on two cores.
func BenchmarkScreenDemo(b *testing.B) {
	m, err := demo.Generate(demo.DefaultConfig())
	if err != nil {
		b.Fatal(err)
	}
	sm := m.Truth.SuggestedModel
	spec := &demand.Spec{Quantity: sm.Quantity, Price: sm.Price, Form: sm.Form, Cluster: sm.Cluster,
		Shifters: screenDemoCandidates, Controls: []string{demo.ColPromo}, FE: []string{"product*store"}}
	d, err := demand.Build(m.Panel, spec, 0)
	if err != nil {
		b.Fatal(err)
	}
	for _, vcov := range []string{"cluster", "hc1"} {
		d.Spec.Vcov = vcov
		b.Run("vcov="+vcov, func(b *testing.B) {
			for b.Loop() {
				if _, err := supplyshifters.Screen(d, nil, supplyshifters.ScreenOptions{}); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
