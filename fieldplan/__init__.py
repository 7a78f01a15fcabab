"""fieldplan: defensible sampling plans for farm fields, vineyards and orchards."""

__version__ = "0.1.0"

__all__ = ["__version__"]
