"""Scalewright: a local dashboard for trimming a draft pool of rating-scale items."""
import os as _os

# The matrices here are small (a few dozen items): one BLAS thread is many times faster than several
# threads fighting over two cores. Must be set before numpy is first imported.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")

__version__ = "0.1.0"
