"""qcpipe: quality control of shore-based ocean logger downloads.

Raw field downloads (immersion probes, temperature loggers, pH and
conductivity sondes, pressure water-level loggers) in, flagged CF/ACDD
NetCDF out.  See README.md for the job and DEVELOPERS.md for the layout.
"""

__version__ = "0.1.0"
