"""Reading and writing: density and raw-sample files in, results out.

  tables    named columns from delimited text, .npy/.npz and HDF5
  reading   densities (slopes, log_density, histogram) -> Density
  samples   raw phase-quenched samples -> Samples, their histogram, blocking
  writing   atomic output files, provenance (sha256, package versions)
"""
