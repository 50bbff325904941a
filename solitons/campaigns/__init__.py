"""Many relaxations: coupling scans, charge surveys, the continuum command, the dask engine, the catalogue."""
