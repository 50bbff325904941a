"""Files: results and checkpoints (HDF5, JSON, XDMF), provenance, output directories."""
