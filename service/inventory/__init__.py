"""The inventory document: our JSON and CSV interchange formats and their validation."""
