"""QGIS plugin: puts the mainspan processing provider into the toolbox.

This folder is the plugin (``metadata.txt``, ``icon.svg``, this module).  It
ships inside the mainspan package (``mainspan/qgis/plugin``) and as the zip
``python -m mainspan.qgis.package OUTDIR`` builds, where it is the top-level
folder ``mainspan_toolbox``.  It holds no algorithm code: the provider comes
from the mainspan package installed in QGIS's Python, so the algorithms
always match the installed mainspan.  When that import fails, the plugin says
so in one message naming the exact ``pip`` command to run.
"""

import os
import sys

PACKAGE = "mainspan"
_HERE = os.path.dirname(os.path.abspath(__file__))


def plugin_version():
    """The ``version`` of this plugin's ``metadata.txt`` (= the mainspan it was built with)."""
    with open(os.path.join(_HERE, "metadata.txt"), encoding="utf-8") as f:
        for line in f:
            key, sep, val = line.partition("=")
            if sep and key.strip() == "version":
                return val.strip()
    return ""


def python_executable():
    """The Python interpreter of this QGIS (``sys.executable`` is often QGIS itself)."""
    exe = sys.executable or ""
    if os.path.basename(exe).lower().startswith("python"):
        return exe
    v = sys.version_info
    names = (["python.exe", f"python{v.major}.exe"] if os.name == "nt"
             else [f"python{v.major}.{v.minor}", f"python{v.major}"])
    for folder in (os.path.join(sys.exec_prefix, "bin"), sys.exec_prefix,
                   os.path.join(sys.base_exec_prefix, "bin"), sys.base_exec_prefix):
        for n in names:
            cand = os.path.join(folder, n)
            if os.path.isfile(cand):
                return cand
    return names[0]


def _externally_managed():
    """PEP 668: the distribution manages this Python's packages (pip needs a flag)."""
    import sysconfig
    try:
        return os.path.isfile(os.path.join(sysconfig.get_paths()["stdlib"], "EXTERNALLY-MANAGED"))
    except (KeyError, OSError):
        return False


def pip_command():
    """The exact command that installs the matching mainspan into QGIS's Python."""
    exe = python_executable()
    if " " in exe:
        exe = f'"{exe}"'
    version = plugin_version()
    spec = f"{PACKAGE}=={version}" if version else PACKAGE
    in_venv = sys.prefix != sys.base_prefix
    flags = [] if in_venv else ["--user"]
    if _externally_managed() and not in_venv:
        flags.append("--break-system-packages")
    return " ".join([exe, "-m", "pip", "install", *flags, spec])


def missing_message(exc):
    """One line: what is missing and the pip command that fixes it."""
    what = str(exc) or type(exc).__name__
    head = (f"the Python package '{PACKAGE}' is not installed in QGIS's Python "
            f"{sys.version.split()[0]}" if getattr(exc, "name", None) == PACKAGE else
            f"the Python package '{PACKAGE}' cannot be imported in QGIS's Python "
            f"{sys.version.split()[0]} ({what})")
    import importlib.util
    todo = "run this in a terminal, then restart QGIS"
    if importlib.util.find_spec("pip") is None:
        todo = ("install pip for it first (on Debian or Ubuntu: sudo apt install python3-pip), "
                "then " + todo)
    return f"mainspan plugin: {head}; {todo}: {pip_command()}"


class _Missing:
    """Stands in for the plugin when mainspan cannot be imported: says so, once."""

    def __init__(self, iface, message):
        self.iface, self.message, self.shown = iface, message, 0

    def _say(self):
        if self.shown:
            return
        self.shown = 1
        from qgis.core import Qgis, QgsMessageLog
        QgsMessageLog.logMessage(self.message, "mainspan", Qgis.Critical)
        if self.iface is not None:
            self.iface.messageBar().pushMessage("mainspan", self.message, Qgis.Critical, 0)

    def initProcessing(self):       # noqa: N802 - QGIS plugin API
        self._say()

    def initGui(self):              # noqa: N802
        self._say()

    def unload(self):
        pass


class MainspanPlugin:
    """Adds (and on unload removes) the ``mainspan`` processing provider."""

    def __init__(self, iface):
        self.iface = iface
        self.provider = None

    def initProcessing(self):       # noqa: N802 - QGIS plugin API
        if self.provider is not None:
            return
        from qgis.core import QgsApplication
        from mainspan.qgis.provider import MainspanProvider
        self.provider = MainspanProvider()
        QgsApplication.processingRegistry().addProvider(self.provider)

    def initGui(self):              # noqa: N802
        self.initProcessing()

    def unload(self):
        if self.provider is not None:
            from qgis.core import QgsApplication
            QgsApplication.processingRegistry().removeProvider(self.provider)
            self.provider = None


def classFactory(iface):            # noqa: N802 - QGIS plugin API
    """QGIS calls this with its interface (None under qgis_process and headless runs)."""
    try:
        import mainspan.qgis.provider  # noqa: F401 - the check itself
        from mainspan.qgis.params import plan_parameters
        plan_parameters()               # imports what the algorithms need (numpy, numba, ...)
    except ImportError as exc:
        return _Missing(iface, missing_message(exc))
    return MainspanPlugin(iface)
