// Package step is limpid's restoration engine: it restores the bands of a
// scene tile by tile and blends the tiles without seams. It knows nothing of
// GDAL; it reads and writes scenes through raster.Reader and raster.Writer
// and tile streams through arrowio's plain Go types.
//
// Where a pixel goes (files of this package):
//
//   - run.go: Config (the job, Resolve fills defaults and validates) and
//     Restore, the raster route: strips of source rows are cut into tiles,
//     solved and blended, finished rows are written.
//   - pipeline.go: the one tile pipeline both routes share: the tile Problem
//     (the input window with a mirrored halo), the worker pool with its
//     first-error rule, the blend-weighted output windows and the blender.
//   - tiles.go: Plan, the tile layout (cores, halo, blend ramps whose weights
//     sum to 1).
//   - ems.go: Problem, Solver and GridEMS, the EMS algorithm of Silverman,
//     Jones, Wilson & Nychka (JRSS-B 52:271-324, 1990) on the pixel grid;
//     with no smoothing it is Richardson-Lucy (Richardson, JOSA 62:55, 1972;
//     Lucy, AJ 79:745, 1974), the Poisson maximum-likelihood EM of Shepp &
//     Vardi (IEEE TMI 1:113, 1982).
//   - particle.go, particle_config.go: ParticleEMS, the sequential Monte
//     Carlo approximation of EMS (particles reweighted by the EMS potential,
//     resampled and moved by the smoothing kernel), with replicate clouds or
//     batch means (Flegal & Jones, Ann. Statist. 38:1034, 2010) for the
//     per-pixel Monte Carlo standard error; uncertainty.go blends it.
//   - auto.go, choose.go: the automatic smoothing and stop: a per-scene
//     Poisson-Gaussian noise model, the divergence of the EMS recursion by
//     forward-mode differentiation along a random probe (Ramani, Blu &
//     Unser, IEEE TIP 17(9), 2008), and an unbiased risk estimate in the DCT
//     domain (Luisier, Blu & Unser, IEEE TIP 20(3), 2011; Eldar, IEEE TSP
//     2009), minimised over candidate bandwidths and iterations; the
//     discrepancy principle (Morozov) as the alternative stop.
package step
