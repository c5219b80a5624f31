"""The `whichsense` command line: one module per subcommand group."""
