"""The library's error types.

Every error a user can cause by what they pass in (a file, a field, an option) is an
:class:`InputError`; a model that cannot be loaded or wrapped raises :class:`ModelError`.
The command line turns any :class:`CulpritLensError` into one line on stderr and exit status 2.
"""

from __future__ import annotations

__all__ = ["CulpritLensError", "InputError", "ModelError"]


class CulpritLensError(Exception):
    """Base class of every error culprit-lens raises on purpose."""


class InputError(CulpritLensError, ValueError):
    """A file, field or option given by the user is missing or wrong.

    The message names the file or field, what was expected, what came, and what to do.
    """


class ModelError(CulpritLensError):
    """A model cannot be loaded, wrapped or run as culprit-lens needs."""
