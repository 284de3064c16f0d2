"""The render room: figures and HTML for people.

``plots`` (figures of one analysis), ``compare_plot`` (the before/after figure),
``history_plot`` (the run chart of the history) and ``report`` (the HTML reports). May import
from every room below it (the use rooms, analysis, io, base), never from ``cli``. matplotlib is
imported only when a figure is drawn.
"""
