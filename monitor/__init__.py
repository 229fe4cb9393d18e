"""ctwd-monitor: screen robotic GMAW seams for contact-tip-to-work distance drift.

Estimates are screening indicators, not weld acceptance. The applicable code (e.g. AWS D1.1,
ISO 5817), the qualified WPS and licensed inspection decide whether a weld is acceptable.
"""

import os

#: The release; pyproject.toml reads it from here (hatch's version source), so there is one place.
__version__ = "0.1.0"

# polars' allocator (its bundled jemalloc) hands freed pages back to the OS within a fraction of a
# second; a scan frees and re-allocates the same batch-sized buffers all night, and faulting them
# back in cost about a third of its CPU time (system time). Keep freed pages 10 s for reuse
# (jemalloc's documented default). Read once, when polars first loads; a value set by the user wins.
os.environ.setdefault("_RJEM_MALLOC_CONF", "dirty_decay_ms:10000,muzzy_decay_ms:10000")

# numpy's bundled OpenBLAS starts a worker thread per core when numpy is imported, and each spins
# on the CPU (about 0.1 s) waiting for work that never comes: nothing here is a large matrix
# product (the calibration fits are a few columns wide). On a 2-core machine that spin takes the
# core the file is being decoded on. One BLAS thread, unless the user set it; read once, when
# numpy first loads.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
