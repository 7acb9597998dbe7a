"""Exact area weights between water-body polygons and climate grid cells."""
