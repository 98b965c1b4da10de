"""magvault: a sample-and-measurement provenance database for magnetic-mineral laboratories.

>>> import magvault
>>> vault = magvault.open("magvault.db")
>>> vault.specimens().head()
"""

from __future__ import annotations

__version__ = "0.1.0"
__all__ = ["open", "Vault", "IngestReport", "MagvaultError", "__version__"]


def open(path_or_url, *, create: bool = False):  # noqa: A001  (the package's entry point, like sqlite3.connect)
    """Open the vault at a SQLite path or SQLAlchemy URL; see :func:`magvault.vault.open_vault`."""
    from .vault import open_vault

    return open_vault(path_or_url, create=create)


def __getattr__(name):
    if name in ("Vault", "IngestReport"):
        from . import vault

        return getattr(vault, name)
    if name == "MagvaultError":
        from .errors import MagvaultError

        return MagvaultError
    raise AttributeError(name)
