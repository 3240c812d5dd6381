// Package ivcore is the numerical engine of priceiv: least squares and
// instrumental-variables estimators computed from moment blocks.
//
// # Overview
//
// Every estimator of the 2SLS family is a function of the cross-products of
// the columns
//
//	A = [y | endogenous | exogenous | excluded instruments]
//
// after fixed effects have been absorbed: the Gram matrix AᵀA and the row
// count n. Cluster-robust covariances need the same cross-products summed
// within each cluster, A_gᵀA_g, because the cluster score
//
//	Z_gᵀe_g = Z_gᵀy_g - Z_gᵀX_g b
//
// is a linear function of them. ivcore therefore works in three steps:
//
//  1. Absorb projects categorical fixed effects out of the columns by
//     alternating projections (see absorb.go).
//  2. Accumulate makes one pass over the rows, split across goroutines and
//     merged by addition, into a Moments value holding AᵀA and, when
//     clustering, the per-cluster blocks.
//  3. Estimate computes OLS, 2SLS, LIML or Fuller coefficients and their
//     covariance (iid, HC1, one- or two-way cluster) from the blocks.
//     Only HC1 needs one more pass over the rows.
//
// # Invariants
//
// Inputs are never modified. Column slices handed to Accumulate are kept by
// reference in the Moments value (for the HC1 pass) and must not be changed
// afterwards. Mismatched lengths are programmer errors and panic with a
// message prefixed "ivcore: "; problems of the data (collinear columns,
// too few instruments, no variation) are returned as errors that name the
// columns involved.
//
// ivcore knows nothing of files, products or prices: columns are plain
// []float64 slices with names.
package ivcore
