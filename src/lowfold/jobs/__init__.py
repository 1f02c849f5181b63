"""The jobs a user runs, each returning a result object: ``derive`` (effective model of a
manifold), ``state_series`` (the series of one state) and ``tasks`` (the named tasks of a
scan)."""
