"""Tests of the spec, protocol, thresholds, store, runner and their commands."""
