"""Matrix-product states on plain arrays: tensors and canonical forms (:mod:`.tensors`).

The layer imports only :mod:`mpsobs.core`. Its public names are re-exported here.
"""

from mpsobs.mps import tensors
from mpsobs.mps.tensors import *  # noqa: F403

__all__ = list(tensors.__all__)
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports
