"""The package version (one place: the face, the command line and model files read it)."""
__version__ = "0.1.0"
