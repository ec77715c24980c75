// Command limpid restores blurred optical satellite imagery tile by tile
// with the EMS algorithm (see the README). main is thin: run does the work
// and is what the tests call.
package main
