"""The test suite: a package, so ``pytest`` and ``python -m pytest`` import it the same way."""
