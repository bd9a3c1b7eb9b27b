"""Condition indices from per-fish length-weight samples (issue 18).

settings    the ``condition:`` section as a checked :class:`ConditionSettings`
samples     reading and checking the per-fish sample tables
lengthweight the length-weight reference (robust log-log fit) and relative condition Kn
index       haul-aware indices per year x season x age group and the season adjustment
poor        the poor-condition share, its haul-level bootstrap and the threshold grid
series      the long output table (``series, year, value, se, n_fish, n_sets, ...``)
"""
