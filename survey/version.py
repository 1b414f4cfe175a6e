"""Version of the bandcensus library (capture and analysis sides); the command line re-exports it."""

__version__ = "0.1.0"
