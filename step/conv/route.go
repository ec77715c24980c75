package conv

import "limpid/psf"

// chooseKind picks the implementation for a kernel: separable when it is
// rank one, direct up to directMaxTaps taps, else the FFT.
func chooseKind(k *psf.Kernel) convKind {
	switch {
	case k.Separable():
		return convSeparable
	case k.W*k.H <= directMaxTaps:
		return convDirect
	}
	return convFFT
}
