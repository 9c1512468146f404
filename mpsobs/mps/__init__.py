"""Matrix-product states on plain arrays: tensors and canonical forms (:mod:`.tensors`),
the truncation rule and truncated splits (:mod:`.truncation`), number charges and
block-by-block decompositions (:mod:`.charges`), and the evolution kernel of layers of
two-site gates (:mod:`.evolution`).

The layer imports only :mod:`mpsobs.core`. The public names of :mod:`.tensors` are
re-exported here.
"""

from mpsobs.mps import tensors
from mpsobs.mps.tensors import *  # noqa: F403

__all__ = list(tensors.__all__)
__dir__ = list(__all__).copy  # dir() lists the public names, not the imports
