"""The service version reported in every response."""

__version__ = "0.1.0"
