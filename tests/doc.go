// Package tests holds the end-to-end and external-check tests of priceiv:
// checks against published worked examples and general-purpose library
// computations, Monte Carlo checks on generated data with known truth,
// and benchmarks. Generated data here is only for generated-truth tests.
package tests
