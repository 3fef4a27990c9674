"""The chunked analysis path: stacks larger than memory, chunk by chunk on disk, exact.

Every step gives the in-memory result (bit for bit for masks, labels, counts and distances;
to rounding for sums of floats), with halos sized from each operation's reach and connected
components merged across chunk faces. Intermediates are chunked arrays on disk in a
temporary folder; tasks run on a dask scheduler (threads by default, or a dask.distributed Client).

dask is imported only when a function here runs.
"""

from .analyze import analyze_chunked, check_chunked_recipe
from .memory import choose_chunks, in_memory_peak_bytes, parse_memory

__all__ = ["analyze_chunked", "check_chunked_recipe", "choose_chunks", "in_memory_peak_bytes",
           "parse_memory"]
