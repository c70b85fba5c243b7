"""Subcommands that drive the whole pipeline (init, check, run, demo, report)."""
