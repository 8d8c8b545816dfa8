"""Landscape layer: reads vectors and rasters, aligns them and sums by unit.

It knows geometry, not nutrition.
"""
