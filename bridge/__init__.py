"""biasbridge: hand square-law analysis, an own level-1 solver and ngspice, side by side."""

import os as _os

# numpy's OpenBLAS starts one thread per CPU when it loads, and they spin while they wait: on
# the few-unknown systems biasbridge solves they never help, and they take a CPU from ngspice's
# worker (which inherits this) and from the read-ahead helper. A user's own setting stands.
_os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

__version__ = "0.1.0"
