// The bounds of a probe count and a seed, apart from the probe code so the command line can check its flags
// before it loads any of the library.

/** Most probes one check runs (our bound: each probe is a whole run of both models; past it, a typo, not a plan). */
export const MAX_PROBES = 10_000;

/** Largest seed: the probe generator takes 32 bits, so larger seeds (and negative ones) repeated smaller ones. */
export const MAX_SEED = 2 ** 32 - 1;
