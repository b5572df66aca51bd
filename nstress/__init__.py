"""nstress: detect, date and size catabolic episodes from serial stable isotopes.

Layers (lower never import higher):
``intake`` -> ``prep`` -> ``model`` -> ``products`` -> ``workflow``.
Shared, layer-free modules: :mod:`nstress.errors`, :mod:`nstress.dims`,
:mod:`nstress.tissues`, :mod:`nstress.equations`.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
