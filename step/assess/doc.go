// Package assess measures a restoration (limpid assess, the HTML report):
// image-quality metrics against a reference and what the restoration did to
// noise, sharpness, ringing and flux.
//
// Assessment of a restoration: fidelity to a reference when one exists
// (PSNR, SSIM of Wang, Bovik, Sheikh & Simoncelli, IEEE TIP 13(4):600-612,
// 2004, RMSE, MAE, bias), of the observation and of the restoration side by
// side over the same pixels with the same peak, and their gain (restored
// minus observed); and, always, what the restoration did to noise,
// sharpness, ringing and flux.
//
// Definitions (README, "limpid assess"):
//   - noise: PlaneNoise, the robust sigma of a Gaussian high-pass residual
//     over the smoothest quarter of the valid pixels; Immerkaer's sigma
//     (CVIU 64(2):300-302, 1996) when too few pixels qualify.
//   - sharpness: ISO 12233 slanted-edge e-SFR (psf.MeasureEdge) on the edges
//     psf.FindEdges detects in the observation, measured in the same windows
//     of both images; MTF50 is the median over edges measured in both, the
//     gain is restored MTF50 / observed MTF50.
//   - ringing: on each edge's ESF (oriented rising), the plateaus are the
//     medians of the outer Plateau fraction of bins on each side; the
//     ringing is max(max ESF - high plateau, low plateau - min ESF) /
//     (high - low plateau), the overshoot or undershoot as a fraction of
//     the edge step; median over edges.
//   - flux change: (sum restored - sum observed) / sum observed over the
//     pixels valid in all inputs.
package assess
