"""The miner and matcher without the product's defaults, for tests written against the
classic unconstrained setting (every gap allowed, pause tokens count, any first item,
single items reported, min_support 0.1) that the reference enumerators check.

The product defaults (``DEFAULT_CONFIG["mine"]``: contiguous patterns of 2-4 items
starting with an action, pauses skipped) are what ``mine()`` uses when called without
arguments; ``tests/test_defaults.py`` checks that they agree everywhere. Keywords
given to the functions below override these settings, as with ``functools.partial``.
"""

from functools import partial

from seqmine.mining import miner as _miner
from seqmine.mining import partitions as _partitions

__all__ = ["UNCONSTRAINED", "mine", "match", "mine_parallel"]

#: Settings of the unconstrained miner.
UNCONSTRAINED = dict(min_support=0.1, min_length=1, max_gap=None, skip_pauses=False,
                     start_with_action=False)

mine = partial(_miner.mine, **UNCONSTRAINED)
mine_parallel = partial(_partitions.mine_parallel, **UNCONSTRAINED)
match = partial(_miner.match, max_gap=None, skip_pauses=False)
