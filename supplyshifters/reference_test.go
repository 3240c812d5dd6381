package supplyshifters

import (
	"math"
	"testing"

	"priceiv/ivcore"
)

// TestWooldridgeMrozDiagnostics checks the MROZ examples of Wooldridge,
// Introductory Econometrics, chapter 15 (inlf == 1, n = 428, model of
// example 15.5: lwage on educ (endogenous), exper, expersq; shifters
// motheduc, fatheduc; usual standard errors):
//   - example 15.7: coefficient on the first-stage residual 0.058, t = 1.67;
//   - example 15.8: Sargan n·R² = 0.378, p ≈ 0.54.
func TestWooldridgeMrozDiagnostics(t *testing.T) {
	m, md := dgModel(dgMroz(t), "lwage", []string{"educ"}, []string{"exper", "expersq"}, []string{"motheduc", "fatheduc"}, nil)
	dg, err := DiagnoseModel(m, md, ivcore.IID, nil, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if dg.N != 428 {
		t.Fatalf("n = %d, want 428", dg.N)
	}
	r := dg.Endogeneity.Residuals[0]
	for _, test := range []struct {
		what      string
		got, want float64
		tol       float64
		source    string
	}{
		{"first-stage residual coefficient", float64(r.Estimate), 0.058, 0.0005, "Wooldridge example 15.7"},
		{"its t statistic", float64(r.T), 1.67, 0.005, "Wooldridge example 15.7"},
		{"Sargan n·R²", float64(dg.Overid.Sargan.Value), 0.378, 0.0005, "Wooldridge example 15.8"},
		{"Sargan p-value", float64(dg.Overid.Sargan.P), 0.54, 0.005, "Wooldridge example 15.8 (p ≈ 0.54)"},
		// Property: Hansen J with an iid weight is Sargan (Hayashi 2000, 3.8).
		{"Hansen J (iid) = Sargan", float64(dg.Overid.HansenJ.Value), float64(dg.Overid.Sargan.Value), 1e-9, "common practice"},
	} {
		if math.Abs(test.got-test.want) > test.tol {
			t.Errorf("%s: got %.5f, want %.4g ± %g (%s)", test.what, test.got, test.want, test.tol, test.source)
		}
	}
	t.Logf("MROZ: v̂ coefficient %.4f (t = %.3f); Sargan %.4f (p = %.3f); m·F %.4f", float64(r.Estimate), float64(r.T),
		float64(dg.Overid.Sargan.Value), float64(dg.Overid.Sargan.P), float64(dg.Overid.MTimesF.Value))
}

// TestStockWatsonCigaretteDiagnostics checks Stock & Watson, Introduction
// to Econometrics, chapter 12, cigarette demand in 10-year differences
// (1995 minus 1985, 48 states; lnQ on lnP with a constant and d lnInc),
// HC1 covariance, as listed in shared/reference-data/README.md:
//   - J = 4.93 (p = 0.026) with both tax shifters, in their form m × the
//     homoskedastic F of the shifters in the regression of the 2SLS
//     residual on all instruments;
//   - first-stage robust F 33.70 (sales tax), 107.20 (cigarette tax),
//     88.60 (both), within 0.1.
//
// Sargan and Hansen J are logged beside.
func TestStockWatsonCigaretteDiagnostics(t *testing.T) {
	d := dgCigarettes(t)
	for i, test := range []struct {
		instr []string
		f     float64 // first-stage robust F, as printed
		j     float64 // J = m·F, as printed (0: just identified)
		jp    float64
	}{
		{[]string{"SalesTax"}, 33.70, 0, 0},
		{[]string{"CigTax"}, 107.20, 0, 0},
		{[]string{"SalesTax", "CigTax"}, 88.60, 4.93, 0.026},
	} {
		m, md := dgModel(d, "lnQ", []string{"lnP"}, []string{"lnInc"}, test.instr, nil)
		dg, err := DiagnoseModel(m, md, ivcore.HC1, nil, Options{})
		if err != nil {
			t.Fatal(err)
		}
		if dg.N != 48 {
			t.Fatalf("%d: n = %d, want 48", i, dg.N)
		}
		if f := float64(dg.FirstStage[0].F.Value); math.Abs(f-test.f) > 0.1 {
			t.Errorf("%d: first-stage F %.3f, want %.2f ± 0.1 (Stock & Watson ch. 12)", i, f, test.f)
		}
		// With one endogenous regressor the KP rk Wald F and the effective
		// F equal the robust first-stage F (property; Kleibergen & Paap
		// 2006, Montiel Olea & Pflueger 2013).
		if kp := float64(dg.WeakIV.KPWald.Value); math.Abs(kp-float64(dg.FirstStage[0].F.Value)) > 1e-8*kp {
			t.Errorf("%d: KP Wald F %.10g differs from the robust first-stage F %.10g", i, kp, float64(dg.FirstStage[0].F.Value))
		}
		if test.j == 0 {
			if dg.Overid.Available || dg.Overid.Reason == "" {
				t.Errorf("%d: just identified, but overid available=%v reason=%q", i, dg.Overid.Available, dg.Overid.Reason)
			}
			continue
		}
		o := dg.Overid
		// Property: the J of the diagnostics is two-step efficient GMM's.
		g, err := ivcore.TwoStepGMM(m, md, ivcore.HC1)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(float64(o.HansenJ.Value)-g.J) > 1e-9*g.J {
			t.Errorf("%d: Hansen J %.10g, TwoStepGMM %.10g", i, float64(o.HansenJ.Value), g.J)
		}
		if math.Abs(float64(o.MTimesF.Value)-test.j) > 0.005 || math.Abs(float64(o.MTimesF.P)-test.jp) > 0.0005 {
			t.Errorf("%d: J = m·F = %.4f (p = %.4f), want %.2f (p = %.3f) (Stock & Watson ch. 12)", i, float64(o.MTimesF.Value), float64(o.MTimesF.P), test.j, test.jp)
		}
		t.Logf("cigarettes, both taxes: J = m·F %.4f (p %.4f); Sargan %.4f (p %.4f); Hansen J (HC1) %.4f (p %.4f); C(SalesTax) %.4f; effective F %.2f (critical %.2f)",
			float64(o.MTimesF.Value), float64(o.MTimesF.P), float64(o.Sargan.Value), float64(o.Sargan.P),
			float64(o.HansenJ.Value), float64(o.HansenJ.P), float64(o.C[0].Value),
			float64(dg.WeakIV.Effective.F), float64(dg.WeakIV.Effective.Critical))
	}
}
