"""Grid kriging outside QGIS: a job described by files, run in one process or on a Dask cluster.

``job`` (:class:`.job.GridJob`, :func:`.job.prepare_job`), ``point_file`` (samples read with OGR), ``runners``
(this process), ``dask_runner`` (Dask, optional: imported only when asked for) and ``cli`` (the command line,
``python -m <plugin folder>.algorithms.cluster``). Nothing here is imported by the plugin.
"""
