// Package level measures scene-wide levels from sampled rows (the
// background percentile of Restore's --background auto) and holds the
// robust medians the automatic choice summarises with: weighted and lower
// medians, and the 3 x 3 median map of a per-tile choice.
package level
