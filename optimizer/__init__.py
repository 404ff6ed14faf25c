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

__version__ = "0.1.0"

__all__ = ["__version__"]
