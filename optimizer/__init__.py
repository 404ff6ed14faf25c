"""stagefit: choose buildable part values for discrete transistor audio stages.

The package follows the data flow::

    spec (YAML → frozen dataclasses, SI units)   optimizer.spec
      → catalog (series, transistor types, stock) optimizer.catalog
      → circuit (topologies as netlists)          optimizer.circuit
      → analysis (DC, AC, large signal, corners)  optimizer.analysis
      → search (CP-SAT, verified by analysis)     optimizer.search
      → outputs (BOM, report, plots, netlist)     optimizer.outputs
      → cli

``import optimizer`` is light: the solver, plotting and table libraries load only in the
functions that need them.
"""

import os as _os

# The analysis solves many small systems in one batched LAPACK call; BLAS threads do not
# speed those up, and on a busy machine their spinning made a check 30 times slower
# (measured: 2.3 s with one thread, 72 s with two, on a loaded 2-core machine). One thread
# unless the user asks otherwise; this must happen before numpy is first imported.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")

__version__ = "0.1.0"

__all__ = ["__version__"]
