"""benchkit: an honest benchmarking harness for multivariate KPI anomaly detectors."""
__version__ = "0.1.0"
