"""Solvent-quality studies: theta-point estimators, the coil-globule transition and their figures.

Modules: :mod:`.theta` (theta estimators, :func:`.theta.summarize_theta`), :mod:`.collapse`
(coil-globule transition), :mod:`.figures` (study figures).
"""
