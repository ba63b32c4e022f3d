"""Pure numpy kernels: 2-D float64 arrays (rows x classes) in, 1-D or 2-D arrays out.

No DuckDB, no Arrow, no I/O. A row the math leaves undefined comes back as NaN;
the Arrow layer turns NaN into SQL NULL. +inf stays +inf.
"""
