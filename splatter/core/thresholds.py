"""Numeric thresholds that more than one stage relies on, named once.

Examples
--------
>>> round(VISIBLE_ALPHA * 255, 6)
1.0
"""

CUTOFF = 3.0
"""Mahalanobis radius at which every splat's footprint ends (the look contract)."""

VISIBLE_ALPHA = 1.0 / 255.0
"""Alpha of one 8-bit step: smoke at or above it can be seen in an 8-bit texture."""

MAX_OPACITY = 1.0 - 1e-6
"""Opacity is clipped here wherever it becomes an optical depth ``-ln(1 - a)``,
so the depth stays finite."""
