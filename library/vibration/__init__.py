"""Vibrations of odorant materials: normal modes, engines (MMFF94, GFN2-xTB), spectra, fingerprints.

Modules: normal_modes (Hessian -> harmonic wavenumbers), mmff and gfn2 (engines),
spectrum (ensemble spectra, EVA fingerprints, band matching), plot, bench.
"""
