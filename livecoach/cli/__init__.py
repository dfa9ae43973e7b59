"""Command-line interface: one entry point ``livecoach`` with subcommands."""
