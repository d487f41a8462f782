"""titlematch: code job titles to occupations and link establishments to a business register.

Pipeline stages, one module each:
normalize -> dictionary -> candidates -> features -> coder -> labels / confidence -> routing
(``calibration`` runs the confidence stages end to end); register -> blocking -> comparison ->
linking for establishments; review, evaluate and drift for the coding office's loop; io,
artefact, runner, dask_engine, progress and cli at the edges. ``DEVELOPERS.md`` has the map.
"""
__version__ = "0.1.0"
