"""Many scans at once: parameter grids and uncertainty ensembles.

``plan`` expands the scans' ``[ensemble]`` sections into members, ``member``
runs one member on a worker (the model compiled once per worker),
``backends`` gives one executor interface over this process, local processes
and a Dask cluster, ``execute`` runs the batch and saves each member as it
finishes, ``folder`` is the batch folder on disk (what ``--resume`` reads),
``tables`` aggregates the members' results, ``analysis`` and ``report`` say
what they mean.
"""
