"""Physics of one-electron spectra, spectra I/O and measurement (no widget imports)."""
