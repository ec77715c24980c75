package main

import "testing"

// parseBench reads the benchmark result lines of go test: name with the
// -GOMAXPROCS suffix, iterations, then value-unit pairs, sub-benchmarks
// named Parent/Sub. Source: the Go benchmark data format
// (go.dev/design/14313-benchmark-format) and `go doc testing`
// ("Benchmarks").
func TestParseBench(t *testing.T) {
	out := []byte(`goos: linux
goarch: amd64
pkg: limpid/step
BenchmarkGridEMS512-2   	      10	 100 ns/op	        52.5 Mpix-iter/s	       0 B/op	       0 allocs/op
BenchmarkGridEMS512-2   	      10	 100 ns/op	        50.0 Mpix-iter/s	       0 B/op	       0 allocs/op
BenchmarkGridEMS512/vector-2   	      10	 100 ns/op	       210.25 Mpix-iter/s
BenchmarkParticleEMS512 	       3	 400 ns/op	        31.0 Mpart-iter/s	        12.5 %splat
PASS
`)
	got := parseBench(out)
	want := map[string]float64{
		"BenchmarkGridEMS512 Mpix-iter/s":        52.5, // the best of the -count runs
		"BenchmarkGridEMS512/vector Mpix-iter/s": 210.25,
		"BenchmarkParticleEMS512 Mpart-iter/s":   31,
		"BenchmarkParticleEMS512 %splat":         12.5,
		"BenchmarkGridEMS512 allocs/op":          0,
	}
	for k, v := range want {
		if g, ok := got[k]; !ok || g != v {
			t.Errorf("%s: %v (found %v), want %v", k, g, ok, v)
		}
	}
	if _, ok := got["BenchmarkGridEMS512-2 Mpix-iter/s"]; ok {
		t.Error("the -GOMAXPROCS suffix stayed in the name")
	}
}
