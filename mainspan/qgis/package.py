"""Build the QGIS plugin zip: ``python -m mainspan.qgis.package OUTDIR``.

The zip holds one folder, ``mainspan_toolbox/``, copied from the plugin
folder inside this package with ``version`` in ``metadata.txt`` set to the
installed mainspan's version, so that the pip command the plugin names
installs the matching package.  The archive is reproducible: entries sorted,
fixed timestamps and modes.  It is written to a temporary file and moved into
place; an existing zip is replaced only with ``--overwrite``.
"""

from __future__ import annotations

import argparse
import io
import os
import re
import sys
import zipfile

from . import PLUGIN_NAME

__all__ = ["build_zip", "plugin_files", "PLUGIN_DIR", "main"]

#: The plugin folder shipped inside the package.
PLUGIN_DIR = os.path.join(os.path.dirname(os.path.abspath(__file__)), "plugin")
_FILES = ("__init__.py", "metadata.txt", "icon.svg")
_STAMP = (2024, 1, 1, 0, 0, 0)


def plugin_files() -> dict:
    """``name in the zip -> bytes`` of the plugin, metadata version set to mainspan's."""
    from .._version import __version__
    from ..errors import DataFileError

    out = {}
    for name in _FILES:
        path = os.path.join(PLUGIN_DIR, name)
        try:
            with open(path, "rb") as f:
                data = f.read()
        except OSError as exc:
            raise DataFileError(f"plugin file {path!r} is missing ({exc.strerror}); "
                                "reinstall mainspan") from None
        if name == "metadata.txt":
            text = data.decode("utf-8")
            text = re.sub(r"(?m)^version=.*$", f"version={__version__}", text)
            data = text.encode("utf-8")
        out[f"{PLUGIN_NAME}/{name}"] = data
    return out


def build_zip(outdir, *, overwrite=False) -> str:
    """Write ``OUTDIR/mainspan_toolbox-<version>.zip``; returns its path.

    Parameters
    ----------
    outdir : str or path-like
        Folder to write into (made if missing).
    overwrite : bool, default False
        Replace an existing zip of the same name.

    Returns
    -------
    str
        The zip's path.
    """
    from .._version import __version__
    from ..safeio import atomic_write

    outdir = os.fspath(outdir)
    os.makedirs(outdir, exist_ok=True)
    path = os.path.join(outdir, f"{PLUGIN_NAME}-{__version__}.zip")
    files = plugin_files()
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for name in sorted(files):
            info = zipfile.ZipInfo(name, _STAMP)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zf.writestr(info, files[name])
    return atomic_write(path, buf.getvalue(), overwrite=overwrite, what="plugin zip")


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="python -m mainspan.qgis.package",
                                description="Build the QGIS plugin zip of mainspan.")
    p.add_argument("outdir", help="folder to write mainspan_toolbox-<version>.zip into")
    p.add_argument("--overwrite", action="store_true", help="replace an existing zip")
    a = p.parse_args(argv)
    from ..errors import DataFileError, InputError
    try:
        path = build_zip(a.outdir, overwrite=a.overwrite)
    except (InputError, DataFileError) as exc:
        print(f"mainspan: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 2
    print(f"written {path}")
    print("install it in QGIS: Plugins > Manage and Install Plugins > Install from ZIP")
    return 0


if __name__ == "__main__":
    sys.exit(main())
