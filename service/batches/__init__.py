"""Batch pipeline logic that needs neither the database nor HTTP: documents, cursors,
webhook URL policy and signatures, summaries and the status document."""
