"""From a problem statement to posterior samples: the initial orbit search, the
emcee driver, the astrometry-only fast path and the fit pipeline."""
