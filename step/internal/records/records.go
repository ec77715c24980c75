package records

// Particle records the particle method's parameters and, per band,
// the mean reported Monte Carlo standard error.
type Particle struct {
	PerPixel     int            `json:"particles_per_pixel"`
	Potential    string         `json:"potential"`
	Resampling   string         `json:"resampling"`
	ESSThreshold float64        `json:"ess_threshold"`
	BurnIn       int            `json:"burn_in"`
	Start        string         `json:"start"`
	Batches      int            `json:"batches"`
	Replicates   int            `json:"replicates"`
	SEMethod     string         `json:"standard_error_method"`
	SEBlend      string         `json:"standard_error_blend"`
	Bands        []ParticleBand `json:"bands"`
}

// ParticleBand is one band's Monte Carlo error summary over its valid
// pixels.
type ParticleBand struct {
	Band int `json:"band"`
	// MeanSE is the mean per-pixel standard error (DN); RelativeSE is
	// sum(SE) / sum(restored - background).
	MeanSE     float64 `json:"mean_standard_error"`
	RelativeSE float64 `json:"relative_standard_error"`
	// With --uncertainty: MeanNoiseSE is the mean data-noise part (DN; the
	// EMS recursion's noise error map at the same settings) and MeanTotalSE
	// the mean of the file's total sqrt(mc^2 + noise^2) (DN).
	MeanNoiseSE float64 `json:"mean_noise_se,omitempty"`
	MeanTotalSE float64 `json:"mean_total_se,omitempty"`
}
