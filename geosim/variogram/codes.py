"""Integer codes by which the compiled kernels know a structure's shape.

Codes 0-99 belong to the built-in structures (:mod:`geosim.variogram.structures`)
and the switch in :mod:`geosim.variogram.compiled`; plugin structures leave the
default -1 or use 100 and above.  Kept apart from both so that the kernels and
the structures read them without importing each other.
"""
NUGGET, SPHERICAL, EXPONENTIAL, GAUSSIAN, CUBIC, MATERN = 0, 1, 2, 3, 4, 5
TABULATED = 99  # correlation read from a table in the compiled model
