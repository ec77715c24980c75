// Package mix is limpid's one place for the integer mixers that turn keys
// (a tile, a band and row, a texture cell) into random-stream selectors, so
// that every random number depends on what it is for and never on the
// scheduler. The mixers are the SplitMix64 finaliser (Steele, Lea & Flood,
// "Fast splittable pseudorandom number generators", OOPSLA 2014) applied to
// different key packings. The packings differ between uses for a reason
// that is not mathematical: outputs recorded with a given --seed must stay
// reproducible, so a packing, once released, is not changed.
package mix
