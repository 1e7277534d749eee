"""Where runs write: a folder the user picks, else a lasting default; quick looks to a temporary folder.

With no folder chosen, full runs write under the first of these that is not
a temporary folder:

1. ``favour-results`` beside the saved project;
2. ``favour-results`` beside the tree file;
3. ``Favour`` in the user's documents (always, even if it were temporary).

Each run writes to a folder of its own, made atomically by :func:`new_folder`
(``run-YYYYMMDD-HHMMSS``, then ``-2``, ``-3`` … if taken), so no run ever
shares or overwrites another's. Quick looks go to QGIS's temporary folder,
each replacing the last; they are gone when QGIS closes unless kept
(:mod:`.keep_results`).

"Temporary" means under QGIS's processing temporary folder or the system's
(:func:`temporary_roots`).
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass

from qgis.core import QgsProcessingUtils, QgsProject
from qgis.PyQt.QtCore import QStandardPaths

from ..core.errors import OutputError
from ..processing.base import is_temporary, temporary_roots
from .common import tr

RESULTS = "favour-results"
QUICK = "favour-quick-look"
DOCUMENTS_FOLDER = "Favour"

#: Why a default folder was chosen, as the dock says it.
REASONS = {
    "project": "beside the project",
    "tree": "beside the tree file",
    "documents": "in your documents",
}


@dataclass(frozen=True)
class DefaultFolder:
    """The folder runs write to when the user chose none, and why it was chosen.

    Attributes
    ----------
    path : str
        The folder (absolute).
    reason : str
        One of :data:`REASONS`: ``"project"``, ``"tree"`` or ``"documents"``.
    """

    path: str
    reason: str

    def describe(self) -> str:
        """Return why, in the dock's words ("beside the project", …)."""
        return tr(REASONS[self.reason])


def documents_folder() -> str:
    """Return the user's documents folder (``QStandardPaths``; ``~/Documents`` if it names none)."""
    path = QStandardPaths.writableLocation(QStandardPaths.DocumentsLocation)
    return os.path.abspath(path or os.path.join(os.path.expanduser("~"), "Documents"))


def default_output(project: QgsProject | None = None, tree_file: str | None = None,
                   project_folder: str | None = None) -> DefaultFolder:
    """Return where full runs write when no folder is chosen, and why.

    Parameters
    ----------
    project : QgsProject, optional
        The project (default: the current one); its folder counts once it is saved.
    tree_file : str, optional
        The tree file the model came from.
    project_folder : str, optional
        The project's folder, when the caller knows it better than the
        project does (while a project is being cleared it has already
        forgotten its file).
    """
    project = project or QgsProject.instance()
    folder = project_folder if project_folder is not None else \
        (project.absolutePath() if project.fileName() else "")
    candidates = []
    if folder:
        candidates.append(DefaultFolder(os.path.join(os.path.abspath(folder), RESULTS), "project"))
    if tree_file:
        candidates.append(DefaultFolder(os.path.join(os.path.dirname(os.path.abspath(tree_file)), RESULTS),
                                        "tree"))
    roots = temporary_roots()
    for candidate in candidates:
        if not is_temporary(candidate.path, roots):
            return candidate
    return DefaultFolder(os.path.join(documents_folder(), DOCUMENTS_FOLDER), "documents")


def default_output_folder(project: QgsProject | None = None, tree_file: str | None = None) -> str:
    """Return the folder of :func:`default_output` (never QGIS's temporary folder)."""
    return default_output(project, tree_file).path


def quick_look_folder() -> str:
    """Return the folder quick looks write to (QGIS's temporary folder for this session)."""
    return os.path.join(QgsProcessingUtils.tempFolder(), QUICK)


def ensure_writable(folder: str) -> str:
    """Make ``folder`` (and its parents) if missing and check a file can be written in it.

    Returns
    -------
    str
        The folder, absolute.

    Raises
    ------
    OutputError
        The folder cannot be made or written; the message names it and the reason.
    """
    folder = os.path.abspath(folder)
    try:
        os.makedirs(folder, exist_ok=True)
        handle, probe = tempfile.mkstemp(prefix=".favour-write-check-", dir=folder)
        os.close(handle)
        os.remove(probe)
    except OSError as exc:
        raise OutputError(tr("cannot write results to {folder}: {reason}").format(
            folder=folder, reason=exc.strerror or exc)) from exc
    return folder


def new_folder(base: str, stem: str) -> str:
    """Make and return a new folder ``base/stem`` (or ``stem-2``, ``stem-3`` … if taken).

    The folder is made with one ``mkdir`` per try, so two callers at the same
    moment never get the same folder and nothing already there is reused.

    Raises
    ------
    OSError
        ``base`` cannot be made, or a folder cannot be made in it.
    """
    os.makedirs(base, exist_ok=True)
    folder, n = os.path.join(base, stem), 1
    while True:
        try:
            os.mkdir(folder)
            return os.path.abspath(folder)
        except FileExistsError:
            n += 1
            folder = os.path.join(base, f"{stem}-{n}")


def display_path(path: str) -> str:
    """Return ``path`` for the dock's texts: under the home folder as ``~/…``, else as it is."""
    if not path:
        return path
    home = os.path.expanduser("~")
    real = os.path.abspath(path)
    if home and home != os.sep and (real == home or real.startswith(home.rstrip(os.sep) + os.sep)):
        return "~" + real[len(home.rstrip(os.sep)):]
    return real
