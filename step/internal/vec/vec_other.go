//go:build !amd64

package vec

// hasAccel: only amd64 has vector kernels; elsewhere the portable Go runs.
const hasAccel = false

func corrAsm(dst, src []float32, offs []int, k []float32, kw int, add bool) {
	corrGo(dst, src, offs, k, kw, add)
}

func ratioAsm(q, hf, d, m []float32, b float32)                   { panic("vec: no vector kernels") }
func updateAsm(e, f, t, s []float32, floor float32)               { panic("vec: no vector kernels") }
func ratioJVPAsm(q, dq, hf, d, m, delta, hu []float32, b float32) { panic("vec: no vector kernels") }
func updateJVPAsm(e, ue, f, u, t, dt, s []float32, floor float32) { panic("vec: no vector kernels") }

func l1SumsAsm(dl, nl *[8]float64, a, b []float32) { panic("vec: no vector kernels") }
