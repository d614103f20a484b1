"""The tool version quoted by bundles and generated artifacts."""

__version__ = "0.1.0"
