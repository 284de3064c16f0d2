"""The inspection room: production pass/fail against limits learned from good parts.

``tolerance`` (tolerance factors and Mahalanobis thresholds), ``limits`` (the limits and the
matching of a part's modes to them), ``learning`` (limits from good parts), ``limits_file`` (the
TOML limits file), ``check`` (the verdict of one part or a batch),
``store`` (the SQLite history) and ``parquet`` (results and history as a Parquet dataset).
A use of the analysis: imports from ``ringdown.analysis``, ``ringdown.io`` and ``ringdown.base``,
never from another use room, ``render`` or ``cli``.
"""
