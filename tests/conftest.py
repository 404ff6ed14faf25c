"""Shared test set-up.

Importing the package first gives the analysis its single BLAS thread before any test
module imports numpy (see optimizer/__init__.py for why).
"""

import optimizer  # noqa: F401
