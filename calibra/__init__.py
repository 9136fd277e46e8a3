"""calibra: find telemetry points with consistent errors by AC state estimation over a week."""

import os as _os

# The numerical kernels work on many small dense and sparse systems; multi-threaded BLAS only adds
# contention there (measured: a 235×235 solve took 5 ms single-threaded and up to 200 ms with
# threads fighting for 2 cores). Parallelism comes from processes over blocks of snapshots.
# Set before numpy is first imported; a user's explicit setting wins.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")

__version__ = "0.1.0"
