"""One module per ``firewatch`` subcommand: ``add_parser`` (light) and ``run`` (imports what it needs)."""
