"""Checks for ``POST /v1/datasets/register``: a local file or Zarr store under a data root.

Accepted: an absolute path, or a path relative to the first data root, with no ``..`` component,
no URL scheme, and whose fully resolved location (every symlink followed) lies inside one of the
configured data roots. Anything else is refused, naming the roots that are allowed.
"""

from __future__ import annotations

import os
import re
from pathlib import Path, PurePosixPath

from app.errors import NotFoundError, RefusedError

_SCHEME = re.compile(r"^[A-Za-z][A-Za-z0-9+.\-]*://")


def _refuse(uri: str, reason: str, roots: list[Path], status: int = 422) -> RefusedError:
    return RefusedError(
        f"uri {uri!r} is refused: {reason}; only files and Zarr stores under the data roots "
        f"({', '.join(str(r) for r in roots) or 'none configured: set LANDLIFT_DATA_ROOTS'}) "
        "can be registered",
        code="path_not_allowed",
        http_status=status,
        uri=uri,
        reason=reason,
        data_roots=[str(r) for r in roots],
    )


def resolve_register_path(uri: str, roots: list[Path]) -> Path:
    """The resolved path for ``uri``, or :class:`RefusedError` explaining the refusal."""
    if not roots:
        raise _refuse(uri, "no data roots are configured", roots, status=403)
    text = uri.strip()
    if not text:
        raise _refuse(uri, "the uri is empty", roots)
    if "\x00" in text:
        raise _refuse(uri, "the uri contains a NUL byte", roots)
    if _SCHEME.match(text) or text.lower().startswith("file:"):
        raise _refuse(uri, "URLs are not accepted, give a path", roots)
    parts = PurePosixPath(text.replace("\\", "/")).parts
    if ".." in parts:
        raise _refuse(uri, "the path contains '..'", roots)
    candidate = Path(text) if os.path.isabs(text) else roots[0] / text
    resolved_roots = [r.resolve() for r in roots]
    # Where the path says it is (no symlinks followed) must already be under a root...
    lexical = Path(os.path.normpath(candidate))
    if not any(lexical.is_relative_to(r) or lexical.is_relative_to(raw)
               for r, raw in zip(resolved_roots, roots, strict=True)):
        raise _refuse(uri, "the path is outside the data roots", roots)
    # ...and where it really is, every link followed, too.
    try:
        real = candidate.resolve(strict=True)
    except FileNotFoundError:
        raise NotFoundError(f"uri {uri!r}: no such file or Zarr store", uri=uri) from None
    except (OSError, RuntimeError) as exc:
        raise _refuse(uri, f"the path cannot be resolved ({exc})", roots) from None
    if not any(real.is_relative_to(r) for r in resolved_roots):
        raise _refuse(uri, "the path leads outside the data roots through a symbolic link", roots)
    if real.is_dir():
        # A Zarr store: no member may link out of the roots either.
        for dirpath, dirnames, filenames in os.walk(real, followlinks=False):
            for name in dirnames + filenames:
                member = Path(dirpath) / name
                if member.is_symlink():
                    target = member.resolve()
                    if not any(target.is_relative_to(r) for r in resolved_roots):
                        raise _refuse(
                            uri, f"member {member.relative_to(real)} links outside the data roots",
                            roots,
                        )
        if not any((real / marker).exists() for marker in (".zgroup", ".zarray", "zarr.json")):
            raise _refuse(uri, "the directory is not a Zarr store", roots)
    elif not real.is_file():
        raise _refuse(uri, "the path is neither a file nor a Zarr store", roots)
    return real
