"""The treatment room: before/after comparison of a damping treatment (``compare``).

A use of the analysis: imports from ``ringdown.analysis``, ``ringdown.io`` and ``ringdown.base``,
never from another use room, ``render`` or ``cli``.
"""
