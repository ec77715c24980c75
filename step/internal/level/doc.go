// Package level measures scene-wide levels from sampled rows: the
// background percentile of Restore's --background auto.
package level
