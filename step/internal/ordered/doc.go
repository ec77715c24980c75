// Package ordered is the tile pipeline's worker pool: jobs are produced on
// one goroutine, solved on several, and finished in production order, so
// that outputs do not depend on the number of workers.
package ordered
