"""Alembic migrations; shipped as a package so an installed whichsense can migrate."""
