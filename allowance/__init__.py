"""allowance: a CECL / IFRS 9 lifetime credit-loss allowance calculator."""

__version__ = "0.1.0"
