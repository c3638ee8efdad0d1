"""From a benchmark result to deployment: export a measured detector as a bundle and apply it.

``bundle`` (the folder format, verification), ``export`` (refit a cell, check it reproduces the
cached scores, write the bundle), ``scoring`` (batch and streaming scoring with the bundle's
scaler, context and threshold), ``rows`` (reading raw KPI rows). Commands:
``benchkit export-model`` and ``benchkit apply`` (:mod:`benchkit.commands`).
"""
