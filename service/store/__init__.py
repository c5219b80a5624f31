"""Persistence: typed SQLAlchemy models and the repositories that use them."""
