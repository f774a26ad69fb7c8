"""Library submodules a command's process never calls, made lazy before anything imports them.

scipy's array-API layer (``scipy._lib.array_api_compat.numpy``) copies numpy's namespace with
``from numpy import *``, and numpy's ``__all__`` names its submodules, so ``import scipy.optimize``
(or ``scipy.sparse``) also loads ``numpy.f2py`` (the Fortran wrapper generator, which loads
charset_normalizer and every text codec) and ``numpy.testing``: about 0.1 s of the 0.85 s a fit
command spent on imports (benchmarks/README.md, "C2"), for modules no command uses.

``defer()`` has them imported lazily (``importlib.util.LazyLoader``, the standard library's own
recipe, through a meta path finder that wraps the usual loader): the module is made when imported
and executed on its first attribute access, so code that does use one sees the whole module, only
later. Called by the command line (``calib.cli.main``) only: a program that
imports ``calib`` as a library keeps its own import behaviour. Where a module is already loaded,
missing, or cannot be deferred, nothing is changed.
"""

from __future__ import annotations

import importlib.util
import sys

#: Submodules no command calls: the two a star-import in scipy loads (see above),
#: scipy.spatial, which scipy.optimize's package import loads for its global optimizer shgo
#: (``from scipy import spatial``; 0.03 s: rotations, k-d trees, qhull), and the compiled part of
#: scipy.linalg.interpolative, which linprog's redundancy removal imports (``interp_decomp``,
#: never called by ``least_squares``) and which imports scipy.fft: 0.07-0.08 s of the 0.8-0.9 s
#: that ``import scipy.optimize, scipy.sparse.linalg, scipy.special`` took here (CPU, medians of
#: 9 fresh interpreters, benchmarks/README.md "A4"). An extension module defers like any other.
UNUSED = ("numpy.f2py", "numpy.testing", "scipy.spatial", "scipy.linalg._decomp_interpolative")


class _Deferring:
    """A meta path finder that hands out the usual spec of each of ``names`` with a lazy loader."""

    def __init__(self, names):
        self.names = frozenset(names)

    def find_spec(self, name, path=None, target=None):
        if name not in self.names:
            return None
        for finder in sys.meta_path:
            find = getattr(finder, "find_spec", None)
            if finder is self or find is None:
                continue
            spec = find(name, path, target)
            if spec is not None:
                if spec.loader is not None and hasattr(spec.loader, "exec_module"):
                    spec.loader = importlib.util.LazyLoader(spec.loader)
                return spec
        return None


def defer(names: tuple[str, ...] = UNUSED) -> None:
    """Import each module of ``names`` lazily from now on (once per process; nothing is imported
    here, so ``--help`` stays without numpy). A module loaded already stays as it is."""
    if not any(isinstance(f, _Deferring) for f in sys.meta_path):
        sys.meta_path.insert(0, _Deferring(names))
