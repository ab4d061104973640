"""The functional core: pure functions of :class:`planner.moments.Moments` (and of the rows
only where a per-row figure needs them). No I/O, no printing."""
