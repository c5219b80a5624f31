"""Scoring the engine: framework F1, baselines, metrics, the WordNet benchmark and reports."""
