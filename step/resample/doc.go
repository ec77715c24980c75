// Package resample holds the resampling schemes of sequential Monte Carlo
// (particle) methods and the effective sample size (Kong, Liu & Wong, JASA
// 89:278, 1994): multinomial, stratified (Kitagawa, JCGS 5:1, 1996),
// systematic (Douc, Cappé & Moulines, ISPA 2005, compare the schemes) and
// residual (Liu & Chen, JASA 93:1032, 1998). Random numbers come from a
// caller's math/rand/v2 PCG, so a particle system's stream decides its
// offspring.
package resample
