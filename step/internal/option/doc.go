// Package option holds the particle method's option types (the potential's
// estimator and the initial cloud) and their flag words; step re-exports
// them by alias.
package option
