"""benchwright's sequencer: procedures, engine, analysis, store, reports and the CLI."""

__version__ = "0.1.0"
