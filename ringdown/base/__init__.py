"""The base room: pieces that know nothing of ring-downs and import nothing from the other rooms.

``errors`` (every error ringdown raises), ``batch`` (the local process-pool batch runner),
``cluster`` (the same batch on a Dask cluster), ``matching`` (the one frequency matcher),
``numfmt`` (the one "value +- u" number formatter) and ``_lazy`` (deferred imports).

The package ``__init__`` files of the rooms import nothing, so ``import ringdown.base.errors``
loads only that module.
"""
