"""numerology: choose and justify OFDM numerologies from channel bounds and goals."""

import os as _os

# The link model solves many small matrices (a few dozen rows each). A second BLAS thread only slows them
# down, by up to a hundred times when the other core is busy (OpenBLAS spins). This takes effect when
# numerology is imported before numpy; a caller's own setting is kept.
for _variable in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_variable, "1")

__version__ = "0.1.0"
