// Package records holds report types of the step package that need no
// engine code (step re-exports them by alias).
package records
