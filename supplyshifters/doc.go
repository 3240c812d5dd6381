// Package supplyshifters answers the pricing analyst's second question:
// can these cost shifters be defended as instruments for price?
//
// # Overview
//
// Diagnose takes a demand design and its fit and returns Diagnostics, the
// evidence an applied economist expects beside an instrumental-variables
// elasticity, each statistic with a sentence saying what it means for the
// estimate:
//
//   - first stage: each shifter's coefficient, standard error, t and
//     expected-sign check, partial R²; with several endogenous regressors
//     the Shea partial R² and the Sanderson-Windmeijer conditional F
//     (FirstStageDetail);
//   - weak instruments: the robust or cluster Wald F, the Cragg-Donald F
//     with Stock & Yogo (2005) critical values (StockYogo), the
//     Kleibergen-Paap rk Wald F and rk LM under-identification test, the
//     Montiel Olea-Pflueger effective F with its critical value
//     (EffectiveF, MOPCritical) and the conservative 23.109 (WeakIV);
//   - over-identification: Sargan, Hansen J from two-step efficient GMM,
//     the m·F form of Stock & Watson, and difference-in-J (C) statistics
//     for each shifter and for named subsets (Overid);
//   - endogeneity: the control-function Durbin-Wu-Hausman test
//     (Endogeneity);
//   - weak-instrument-robust inference: Anderson-Rubin tests and the
//     Anderson-Rubin band by test inversion, with its shape in words
//     (ARBand);
//   - the grouped (Wald) estimator per shifter, the whiteboard picture
//     (Grouped);
//   - the reduced form of the outcome on the shifters (ReducedForm).
//
// WriteText and WriteMarkdown print the evidence; the Diagnostics value
// encodes to JSON without failure (undefined numbers become null).
//
// # Moments, not rows
//
// Everything except the grouped estimator is computed from the moment
// blocks of package ivcore: the Gram matrix of the absorbed columns and,
// for cluster-robust statistics, the per-cluster blocks. Residuals,
// first-stage fits and hypothesised outcomes y - b₀x are linear
// combinations of the columns, so their cross-products follow from the
// Gram matrix. Heteroskedasticity-robust (HC1) statistics need the scores
// of each row: all of them share one pass over the rows
// (Moments.ScoreCov with several residual combinations), and the
// control-function test makes one more. The grouped estimator splits rows
// by a shifter's median and so reads the rows themselves.
//
// DiagnoseModel works on moments alone, for any model on them: a screen of
// candidate shifters accumulates the moments once with every candidate and
// calls DiagnoseModel for each subset, choosing the statistics it needs
// with Options.Parts.
//
// # Conventions
//
// Statistics use the covariance kind of the fit (iid, HC1 or
// cluster-robust, with the small-sample factors of ivcore). Statistics
// that weight moment conditions (Hansen J, C, the rk LM) use sums without
// small-sample factors, as is common practice. Critical values and
// p-values of F statistics use F(q, df) with the covariance's degrees of
// freedom (n - k, or G - 1 with clusters).
//
// A cost shifter is expected to raise price: a first-stage coefficient of
// the other sign is reported as a warning, never hidden. Options.ExpectSign
// declares shifters that lower price.
package supplyshifters
