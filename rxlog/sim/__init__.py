"""The simulated sky and station: what a decametric station receives, as spectra or IQ
samples, with the list of everything that was put there (the truth)."""
