"""Shapely geometry: the problem's shapes, the outline of a level set, and its measurements."""
