"""One module per subcommand; each exposes ``command`` (a click.Command). Discovered by the CLI."""
