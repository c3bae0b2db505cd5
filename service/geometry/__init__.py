"""Pure numerics of the diffusion map: graphs, spectra, distances, extension, groups.

Imports numpy, scipy, scikit-learn and the standard library only.
"""
