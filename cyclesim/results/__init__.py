"""Results: figures of merit, motored-cycle figures, energy-balance labels, grouped warnings, atomic files and the --out folder."""
