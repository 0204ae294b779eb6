"""Period analysis: periodograms, phase dispersion, aliases, harmonic fits and prewhitening."""
