"""The analysis room: from one :class:`~ringdown.io.recording.Recording` to its modes.

``condition`` (DC, trend, clipping, onset), ``peaks`` and ``detect`` (which modes are there),
``bands`` (one mode's band and spectrum), ``estimators/`` (one module per estimation method,
registered in ``estimators/__init__.py``), ``pipeline`` (``analyze`` and friends),
``results`` (the frozen result types), ``quantities`` (derived quantities of a mode) and
``crlb`` (the Cramer-Rao bound). Imports only from ``ringdown.io`` and ``ringdown.base``.
"""
