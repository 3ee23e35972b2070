"""nanproof: finds numerically unstable softmax, log-sum-exp, cross-entropy and sigmoid
code in Python source and proposes stable rewrites. It reads code; it never runs it."""

__version__ = "0.1.0"
__all__ = ["__version__"]
