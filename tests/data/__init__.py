"""Tests of the dataset layer: loaders, validation, demo scenario, export, summary, CLI."""
