"""prespec: an analysis-plan compiler. See DEVELOPERS.md for the tour of the passes."""

__version__ = "0.1.0"
