"""The materials room: elastic moduli from the resonant frequencies of a bar or rod (``moduli``).

A use of the analysis: imports from ``ringdown.analysis``, ``ringdown.io`` and ``ringdown.base``,
never from another use room, ``render`` or ``cli``.
"""
