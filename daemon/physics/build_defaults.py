"""The assumptions a club built from parts starts from, apart from the physics that uses them.

Kept in a module of their own so the command line can show them in its help without importing
the prediction code (``heft calc`` starts many times a day).
"""

from __future__ import annotations

import enum

# Head CG back from the far end of the club along the shaft axis: 0.5-1.5 in (common practice).
DEFAULT_HEAD_CG_FROM_END_IN = 1.0
# Grip CG from the butt: 4-5 in (common practice).
DEFAULT_GRIP_CG_IN = 4.5


class End(enum.StrEnum):
    """The end of the club a part moves with when the length changes."""

    TIP = "tip"
    BUTT = "butt"
