"""kplan: plan, check and fit absorbance experiments that measure formation constants."""

__version__ = "0.1.0"
