"""Figures and the interactive window (vtk/pyvista are imported only when drawing).

``crystalview.render`` is both this package and the public function
``cv.render(crystal, path, ...)``: once a submodule is imported, Python binds
the package to the name ``render`` on ``crystalview``, so the package itself
is made callable and forwards to :func:`crystalview.render.figure.render`.
"""
import sys as _sys
import types as _types


class _CallablePackage(_types.ModuleType):
    def __call__(self, *args, **kwargs):
        from .figure import render

        return render(*args, **kwargs)


_sys.modules[__name__].__class__ = _CallablePackage
