"""railtrace: bank shots, ball paths and cushion liveliness measured from overhead video."""

__version__ = "0.1.0"
