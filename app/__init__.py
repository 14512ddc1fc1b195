"""wakeledger: the shot ledger and self-modulation model check of a campaign."""

import os

__version__ = "0.1.0"

# Arrow (Parquet exports, imports, the planner's files) allocates from the C library, unless the
# environment says otherwise: Arrow's own pool keeps the pages it used, which the Python objects
# of the next request cannot reuse (a week's Parquet export peaked 40 MB higher with it). Read
# once, when pyarrow loads, so it is set here, before anything imports it.
os.environ.setdefault("ARROW_DEFAULT_MEMORY_POOL", "system")
