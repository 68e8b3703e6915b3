"""sweep: planet-yield sweeps for space-telescope mission studies.

The public API is small:

- :func:`open_cube` opens a result store as a lazy, labelled :class:`xarray.Dataset`.
- :func:`load_spec` reads and validates a sweep definition (TOML).
- :class:`UserInputError` is raised for every mistake in the user's input.
"""

from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("sweep")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+unknown"

from sweep.errors import UserInputError  # noqa: E402


def open_cube(path):
    """Open a result store as a lazy :class:`xarray.Dataset` (units and spec in ``attrs``)."""
    from sweep.store import open_cube as _open_cube

    return _open_cube(path)


def load_spec(path):
    """Read and validate a sweep definition; return the :class:`sweep.spec.Spec`."""
    from sweep.spec import load_spec as _load_spec

    return _load_spec(path)


__all__ = ["__version__", "open_cube", "load_spec", "UserInputError"]
