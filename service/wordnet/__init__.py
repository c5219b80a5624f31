"""WordNet 3.0 as a sense inventory, a source of labeled corpora, and a benchmark oracle."""
