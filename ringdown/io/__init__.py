"""The io room: recordings in, files out.

``recording`` (the :class:`Recording` every reader returns), ``read`` (``read_recording``:
sound files, delimited text, standard input, and the dispatch to ``formats/``), ``formats/``
(one module per data-acquisition format) and ``outputs`` (atomic writes and CSV rows).
Imports only from ``ringdown.base``.
"""
