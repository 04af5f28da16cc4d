"""Rendering: label raster, frame layout, frame iterator, encoders, small multiples, static maps.

Import-light: submodules load matplotlib, Pillow and imageio only when used.
"""
