"""Tidemap: a diffusion-geometry map of a text archive, served over HTTP."""
