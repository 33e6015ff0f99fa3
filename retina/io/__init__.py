"""File formats: atomic writes, the native HDF5 layout, importers of other engines' tables."""
