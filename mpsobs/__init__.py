"""mpsobs: observational entropy of long quantum spin chains as matrix-product states.

Entry points: :func:`observational_entropy` (dense states and MPS), the coarse-grainings
of :mod:`mpsobs.coarse`, the models of :mod:`mpsobs.models`.
"""

from mpsobs.entropy import observational_entropy
from mpsobs.errors import InputError

__version__ = "0.1.0"
__all__ = ["observational_entropy", "InputError", "__version__"]
