"""The inspection room: production pass/fail against limits learned from good parts.

``tolerance`` (tolerance factors and Mahalanobis thresholds), ``limits`` (learning, the limits
file, matching a part's modes to the limits), ``check`` (the verdict of one part or a batch),
``store`` (the SQLite history) and ``parquet`` (results and history as a Parquet dataset).
A use of the analysis: imports from ``ringdown.analysis``, ``ringdown.io`` and ``ringdown.base``,
never from another use room, ``render`` or ``cli``.
"""
