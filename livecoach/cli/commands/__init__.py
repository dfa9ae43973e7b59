"""One module per subcommand (see :mod:`livecoach.cli.main`)."""
