"""Quality-control checks: pure numpy functions, arrays in, int8 flags out.

Flags follow the IOC/UNESCO primary flag scheme (see :mod:`qcpipe.checks.flags`):
1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing. Every check is O(n) in the
series length whatever its window, and never reads or writes files.
"""

from .flags import (
    FAIL,
    FLAG_KEYS,
    FLAG_MEANINGS,
    FLAG_VALUES,
    FLAG_WORDS,
    MISSING,
    NOT_EVALUATED,
    PASS,
    SUSPECT,
    aggregate_flags,
    worst_flag,
)
from .barometer import barometer_fallback_flags
from .flatline import flat_line_flags
from .gap import GAP_DTYPE, find_gaps, gap_flags
from .range import climatology_flags, gross_range_flags
from .rate import rate_of_change_flags
from .spike import spike_flags

__all__ = [
    "FAIL",
    "FLAG_KEYS",
    "FLAG_MEANINGS",
    "FLAG_VALUES",
    "FLAG_WORDS",
    "GAP_DTYPE",
    "MISSING",
    "NOT_EVALUATED",
    "PASS",
    "SUSPECT",
    "aggregate_flags",
    "barometer_fallback_flags",
    "climatology_flags",
    "find_gaps",
    "flat_line_flags",
    "gap_flags",
    "gross_range_flags",
    "rate_of_change_flags",
    "spike_flags",
    "worst_flag",
]
