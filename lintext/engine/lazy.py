"""NumPy, imported when first used: the command line declares its options from the engine's
registries (losses, optimizers, options), and ``lintext --help`` loads no NumPy
(``tests/cli/test_startup.py``). ``from .lazy import np`` then ``np.zeros(...)`` as usual."""

from __future__ import annotations


class _NumPy:
    def __getattr__(self, name):  # called once per name: the value is then an attribute of the instance
        import numpy

        value = getattr(numpy, name)
        setattr(self, name, value)
        return value


np = _NumPy()
