"""Output folders that ``zoning`` owns: manifests, ownership checks, safe installation, locks.

``zoning`` never deletes or overwrites a file or folder it did not create.
It knows what it created from a *manifest*, ``.zoning-manifest.json``, kept
in every folder it writes results into::

    {
      "zoning_manifest": 1,
      "kind": "batch",            # or "sample", "fit", "inspect"
      "status": "complete",       # "writing" while files are being replaced
      "zoning_version": "0.1.0",
      "written_utc": "2025-01-31T10:00:00Z",
      "created_folder": true,     # the folder did not exist before zoning wrote it
      "files": {"summary.csv": {"sha256": "...", "bytes": 1234}, ...},
      "folders": ["FRL-07_ol1", ...],
      ...                         # kind-specific entries (e.g. the fingerprint)
    }

Rules (the same for every command):

* A file is zoning's if the manifest of the folder it is written into lists
  it (by its path relative to that folder). Any other existing file of the
  same name is *foreign*: zoning refuses to write, before doing any work,
  with :class:`~zoning.exceptions.OutputRefusedError` naming it.
* A folder is zoning's if it holds a manifest (or is empty). A batch never
  replaces a sample folder wholesale: new files are moved in one by one
  (each atomically), files of the old result that are no longer produced
  are removed only when the old manifest lists them, and anything else in
  the folder stays where it is.
* While a folder's files are being replaced its manifest says
  ``"status": "writing"``; a folder left in that state (power cut,
  ``kill -9``) is recognised as incomplete and redone by the next run.
* :func:`verify_folder` checks that every listed file is present with the
  recorded size and SHA-256 hash; "unchanged" means exactly that.

Helpers for other writers: :class:`OutputFolder` (claim names, write or
record files, seal the manifest) and, for a folder built elsewhere and moved
into place, :func:`make_build_folder`, :func:`seal_folder` and
:func:`install_folder`. :class:`OutputLock` keeps two runs out of one folder.
"""

from __future__ import annotations

import datetime as _dt
import errno
import hashlib
import json
import os
import re
import shutil
import socket
import sys
import tempfile
import time
from collections.abc import Iterable, Mapping
from pathlib import Path, PurePosixPath
from typing import Any

from zoning.exceptions import OutputLockedError, OutputRefusedError, ZoningError

__all__ = [
    "MANIFEST_NAME",
    "LOCK_NAME",
    "PARTIAL_PREFIX",
    "sha256_file",
    "read_manifest",
    "write_manifest",
    "verify_folder",
    "folder_state",
    "check_output_dir",
    "OutputFolder",
    "make_build_folder",
    "seal_folder",
    "install_folder",
    "clean_partials",
    "OutputLock",
    "process_alive",
]

#: Name of the manifest kept in every output folder.
MANIFEST_NAME = ".zoning-manifest.json"

#: Name of the lock file of a batch output folder.
LOCK_NAME = ".zoning-lock"

#: Prefix of the temporary build folders of a batch (hidden, removed when done).
PARTIAL_PREFIX = ".partial-"

#: Marker file inside a build folder: who made it (pid, host, time).
_PARTIAL_MARK = ".zoning-partial"

#: Name of a build folder: prefix, sample folder, pid, start id, random part.
_PARTIAL_NAME = re.compile(r"^\.partial-.+-(\d+)-(\d*)-[a-z0-9_]{8}$")

#: Version of the manifest layout.
_MANIFEST_VERSION = 1

#: Files a sample folder of zoning 0.1.0 (before manifests) could hold.
_LEGACY_SAMPLE_FILES = frozenset(
    ["fit.json", "profile.csv", "fingerprint.json", "report.pdf"]
    + [f"{n}.{e}" for n in ("profile", "melt_path", "posterior") for e in ("png", "pdf")]
)


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def sha256_file(path: str | os.PathLike) -> str:
    """Return the hex SHA-256 digest of a file's bytes.

    Parameters
    ----------
    path : str or path-like
        A regular file.

    Returns
    -------
    str
    """
    h = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _entry(path: Path) -> dict[str, Any]:
    return {"sha256": sha256_file(path), "bytes": path.stat().st_size}


def _rel(rel: str | os.PathLike) -> str:
    """Normalise a relative path to POSIX form; refuse escapes."""
    text = PurePosixPath(*Path(rel).parts).as_posix()
    parts = PurePosixPath(text).parts
    if not parts or Path(rel).is_absolute() or ".." in parts:
        raise ValueError(f"expected a path inside the output folder; got {str(rel)!r}")
    return text


def read_manifest(folder: str | os.PathLike) -> dict[str, Any] | None:
    """Return the manifest of a folder, or None when it has no valid one.

    Parameters
    ----------
    folder : str or path-like

    Returns
    -------
    dict or None
    """
    path = Path(folder) / MANIFEST_NAME
    try:
        if not path.is_file() or path.is_symlink():
            return None
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("zoning_manifest") != _MANIFEST_VERSION:
        return None
    if not isinstance(data.get("files"), dict):
        return None
    return data


def write_manifest(
    folder: str | os.PathLike,
    files: Mapping[str, Mapping[str, Any]],
    *,
    kind: str,
    status: str = "complete",
    created_folder: bool = False,
    folders: Iterable[str] = (),
    extra: Mapping[str, Any] | None = None,
) -> Path:
    """Write (atomically) the manifest of a folder.

    Parameters
    ----------
    folder : str or path-like
        The output folder.
    files : mapping
        Relative path -> ``{"sha256": ..., "bytes": ...}`` (hash may be None
        for a name claimed but not written yet).
    kind : str
        "batch", "sample", "fit", "inspect" or another command's name.
    status : {"complete", "writing"}
    created_folder : bool
        Whether zoning created the folder itself.
    folders : iterable of str
        Subfolders zoning created.
    extra : mapping, optional
        Kind-specific entries (plain JSON types).

    Returns
    -------
    pathlib.Path
    """
    from zoning.io.writers import write_json

    from zoning import __version__

    record: dict[str, Any] = {
        "zoning_manifest": _MANIFEST_VERSION,
        "kind": kind,
        "status": status,
        "zoning_version": __version__,
        "written_utc": _now(),
        "created_folder": bool(created_folder),
        "files": {k: dict(v) for k, v in sorted(files.items())},
        "folders": sorted(set(folders)),
    }
    for key, value in (extra or {}).items():
        record.setdefault(key, value)
    return write_json(Path(folder) / MANIFEST_NAME, record)


def _legacy_sample(folder: Path) -> dict[str, Any] | None:
    """Adopt a sample folder written by zoning 0.1.0 (no manifest yet)."""
    try:
        names = {p.name for p in folder.iterdir()}
        record = json.loads((folder / "fingerprint.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not names <= _LEGACY_SAMPLE_FILES or not isinstance(record, dict):
        return None
    if "fingerprint" not in record or "row" not in record:
        return None
    if any((folder / n).is_symlink() or not (folder / n).is_file() for n in names):
        return None
    return {
        "zoning_manifest": _MANIFEST_VERSION,
        "kind": "sample",
        "status": "legacy",
        "files": {n: {"sha256": None, "bytes": None} for n in sorted(names)},
        "folders": [],
    }


def folder_state(folder: str | os.PathLike, *, legacy_sample: bool = False) -> str:
    """Say whether zoning may write into a folder.

    Parameters
    ----------
    folder : str or path-like
    legacy_sample : bool
        Also adopt a sample folder of zoning 0.1.0 (no manifest; only the
        files that version wrote).

    Returns
    -------
    str
        ``"absent"``; ``"empty"`` (an empty real folder); ``"ours"`` (holds a
        manifest); ``"file"`` (a file, link or device is in the way);
        ``"foreign"`` (a folder with content zoning did not mark).
    """
    folder = Path(folder)
    try:
        st = os.lstat(folder)
    except FileNotFoundError:
        return "absent"
    import stat as _stat

    if not _stat.S_ISDIR(st.st_mode):
        return "file"
    if read_manifest(folder) is not None:
        return "ours"
    try:
        empty = not any(True for _ in folder.iterdir())
    except OSError:
        return "foreign"
    if empty:
        return "empty"
    if legacy_sample and _legacy_sample(folder) is not None:
        return "ours"
    return "foreign"


def _manifest_or_legacy(folder: Path) -> dict[str, Any] | None:
    return read_manifest(folder) or _legacy_sample(folder)


def _listing(folder: Path) -> dict[str, Path]:
    """Every regular file below ``folder`` (relative POSIX path -> path), manifest excluded."""
    out = {}
    for root, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not os.path.islink(os.path.join(root, d)))
        for name in sorted(files):
            path = Path(root) / name
            rel = path.relative_to(folder).as_posix()
            if rel in (MANIFEST_NAME, _PARTIAL_MARK):
                continue
            out[rel] = path
    return out


def verify_folder(folder: str | os.PathLike) -> str:
    """Check a folder against its manifest.

    Parameters
    ----------
    folder : str or path-like

    Returns
    -------
    str
        "" when the manifest is complete and every file it lists is present
        with the recorded size and SHA-256 hash; otherwise the reason in
        plain words (e.g. ``"fit.json was changed after it was written"``).
    """
    folder = Path(folder)
    manifest = read_manifest(folder)
    if manifest is None:
        if _legacy_sample(folder) is not None:
            return "written by an earlier zoning version without file hashes"
        return "no manifest of zoning in the folder"
    if manifest.get("status") != "complete":
        return "an earlier run was stopped while writing this folder"
    for rel, entry in manifest["files"].items():
        path = folder / rel
        if not path.is_file():
            return f"{rel} is missing"
        size = path.stat().st_size
        if size == 0 and entry.get("bytes"):
            return f"{rel} was emptied"
        if size != entry.get("bytes") or sha256_file(path) != entry.get("sha256"):
            return f"{rel} was changed after it was written"
    return ""


def _writable_probe(folder: Path) -> str:
    """Try to create a file in ``folder``; return "" or the OS error text."""
    try:
        fd, tmp = tempfile.mkstemp(prefix=".zoning-probe-", dir=folder)
    except OSError as exc:
        return exc.strerror or str(exc)
    os.close(fd)
    try:
        os.unlink(tmp)
    except OSError:  # pragma: no cover - vanished already
        pass
    return ""


def check_output_dir(path: str | os.PathLike, *, option: str = "--out") -> Path:
    """Check, before any work, that an output folder can be created and written.

    Parameters
    ----------
    path : str or path-like
        The output folder (need not exist yet).
    option : str, optional
        How the user gave it, for the message (default ``--out``).

    Returns
    -------
    pathlib.Path
        The absolute folder path.

    Raises
    ------
    OutputRefusedError
        When the path is an existing file (or a file stands where a parent
        folder should be) or the folder (or its nearest existing parent)
        cannot be written.
    """
    path = Path(path).expanduser()
    absolute = Path(os.path.abspath(path))
    probe = absolute
    while not probe.exists() and probe != probe.parent:
        if probe.is_symlink():
            raise OutputRefusedError(
                f"{option} {str(path)!r}: {str(probe)!r} is a broken link. Give another folder."
            )
        probe = probe.parent
    if not probe.is_dir():
        where = "is" if probe == absolute else f"lies inside {str(probe)!r}, which is"
        raise OutputRefusedError(
            f"{option} {str(path)!r} {where} a file, not a folder. Give a folder name, "
            f"e.g. {option} results."
        )
    problem = _writable_probe(probe)
    if problem:
        what = "folder" if probe == absolute else f"parent folder {str(probe)!r}"
        raise OutputRefusedError(
            f"{option} {str(path)!r}: cannot write into the {what} ({problem}). Give a "
            f"folder you can write to, e.g. {option} ~/results."
        )
    return absolute


def _describe(folder: Path, limit: int = 3) -> str:
    try:
        names = sorted(p.name for p in folder.iterdir())
    except OSError:
        return ""
    shown = ", ".join(names[:limit]) + (", ..." if len(names) > limit else "")
    return f" (it holds {shown})" if names else ""


class OutputFolder:
    """A folder zoning writes files into, with its manifest.

    Typical use (``zoning fit``, ``zoning inspect``, the batch's own files)::

        folder = OutputFolder(out, kind="fit")
        folder.claim(["summary.csv", "summary.json", "ol1/fit.json"])  # refuses foreign files
        write_table(df, folder.path("summary.csv"), provenance=...)
        folder.record("summary.csv", "summary.json")                   # hashes into the manifest
        folder.finish()

    Parameters
    ----------
    root : str or path-like
        The folder (created by :meth:`claim` when missing).
    kind : str
        Recorded in the manifest ("fit", "inspect", "batch", ...).
    option : str, optional
        How the user named the folder, for messages (default ``--out``).
    """

    def __init__(self, root: str | os.PathLike, *, kind: str, option: str = "--out"):
        self.root = Path(os.path.abspath(Path(root).expanduser()))
        self.kind = kind
        self.option = option
        old = read_manifest(self.root) if self.root.is_dir() else None
        self._old = old or {}
        self._created = bool(old.get("created_folder")) if old else not self.root.exists()
        self.files: dict[str, dict[str, Any]] = dict(self._old.get("files", {}))
        self.folders: set[str] = set(self._old.get("folders", []))
        self.extra: dict[str, Any] = {}

    def path(self, rel: str | os.PathLike) -> Path:
        """Absolute path of a file of this folder."""
        return self.root / _rel(rel)

    def owns(self, rel: str | os.PathLike) -> bool:
        """Whether the manifest lists ``rel`` (a file zoning wrote here)."""
        return _rel(rel) in self.files

    def foreign(self, rels: Iterable[str | os.PathLike]) -> list[str]:
        """Those of ``rels`` that exist and were not written by zoning."""
        out = []
        for rel in rels:
            rel = _rel(rel)
            path = self.root / rel
            if rel in self.files:
                if path.is_symlink() or (path.exists() and not path.is_file()):
                    out.append(rel)
                continue
            if os.path.lexists(path):
                out.append(rel)
                continue
            # A parent that is a file or link is in the way too.
            for parent in PurePosixPath(rel).parents:
                if str(parent) == ".":
                    continue
                p = self.root / parent
                if os.path.lexists(p) and (p.is_symlink() or not p.is_dir()):
                    out.append(str(parent))
                    break
        return out

    def check(self, rels: Iterable[str | os.PathLike]) -> None:
        """Refuse, without writing anything, names that are taken by foreign files.

        Also checks that the folder can be created and written.

        Raises
        ------
        OutputRefusedError
            When any of them exists and is not zoning's, listing them all.
        """
        rels = [_rel(r) for r in rels]
        clash = self.foreign(rels)
        if clash:
            shown = ", ".join(repr(c) for c in clash[:5]) + (" ..." if len(clash) > 5 else "")
            raise OutputRefusedError(
                f"refusing to write into {str(self.root)!r}: {shown} already exist"
                f"{'s' if len(clash) == 1 else ''} and {'was' if len(clash) == 1 else 'were'} "
                "not written by zoning (no entry in its .zoning-manifest.json). Nothing was "
                f"written. Choose another {self.option} folder, or move those files away."
            )
        check_output_dir(self.root, option=self.option)

    def claim(self, rels: Iterable[str | os.PathLike]) -> None:
        """Reserve file names before writing them.

        Checks them (:meth:`check`), creates the folder (and subfolders) and
        writes the manifest with ``"status": "writing"`` listing the names,
        so that an interrupted write leaves files zoning still recognises as
        its own.

        Raises
        ------
        OutputRefusedError
            When any of them exists and is not zoning's, listing them all;
            nothing is written then.
        """
        rels = [_rel(r) for r in rels]
        self.check(rels)
        self.root.mkdir(parents=True, exist_ok=True)
        for rel in rels:
            for parent in reversed(PurePosixPath(rel).parents):
                if str(parent) == ".":
                    continue
                p = self.root / parent
                if not p.exists():
                    p.mkdir()
                    self.folders.add(str(parent))
            self.files.setdefault(rel, {"sha256": None, "bytes": None})
        self._write("writing")

    def record(self, *rels: str | os.PathLike) -> None:
        """Hash files just written (by any writer) into the manifest."""
        for rel in rels:
            rel = _rel(rel)
            self.files[rel] = _entry(self.root / rel)

    def record_path(self, path: str | os.PathLike) -> None:
        """Like :meth:`record`, with an absolute path inside the folder."""
        self.record(Path(os.path.abspath(path)).relative_to(self.root).as_posix())

    def finish(self, **extra: Any) -> Path:
        """Write the final manifest (``"status": "complete"``)."""
        self.extra.update(extra)
        for rel, entry in list(self.files.items()):
            if entry.get("sha256") is None:
                path = self.root / rel
                if path.is_file():
                    self.files[rel] = _entry(path)
                else:
                    del self.files[rel]
        return self._write("complete")

    def _write(self, status: str) -> Path:
        return write_manifest(
            self.root, self.files, kind=self.kind, status=status,
            created_folder=self._created, folders=self.folders, extra=self.extra,
        )


def make_build_folder(out_dir: str | os.PathLike, name: str) -> Path:
    """Create a hidden, marked temporary folder in ``out_dir`` to build a result in.

    Parameters
    ----------
    out_dir : str or path-like
        The batch output folder.
    name : str
        The (safe) name of the folder the result will become.

    Returns
    -------
    pathlib.Path
        ``out_dir/.partial-<name>-<pid>-<random>/`` holding a marker file
        naming this process; :func:`clean_partials` removes it if the process
        dies before :func:`install_folder` moves the result into place.
    """
    from zoning.io.writers import write_json

    out_dir = Path(out_dir)
    pid = os.getpid()
    start = _start_id(pid)
    # The owner is in the name too, so a run killed before the marker is
    # written still leaves a folder that clean_partials recognises.
    build = Path(tempfile.mkdtemp(prefix=f"{PARTIAL_PREFIX}{name}-{pid}-{start}-", dir=out_dir))
    write_json(build / _PARTIAL_MARK, {"pid": pid, "host": socket.gethostname(),
                                       "started_utc": _now(), "start_id": start})
    return build


def seal_folder(folder: str | os.PathLike, *, kind: str, extra: Mapping[str, Any] | None = None
                ) -> dict[str, Any]:
    """Write the manifest of a finished build folder, listing every file in it.

    Parameters
    ----------
    folder : str or path-like
        A folder made by :func:`make_build_folder` (everything in it is zoning's).
    kind : str
    extra : mapping, optional

    Returns
    -------
    dict
        The file entries written.
    """
    folder = Path(folder)
    files = {rel: _entry(p) for rel, p in _listing(folder).items()}
    subdirs = {Path(r).parent.as_posix() for r in files if "/" in r}
    write_manifest(folder, files, kind=kind, created_folder=True, folders=subdirs, extra=extra)
    return files


def install_folder(build: str | os.PathLike, target: str | os.PathLike) -> None:
    """Move a sealed build folder's files into ``target`` without touching foreign files.

    ``target`` must be absent, empty or zoning's (see :func:`folder_state`).
    A new folder is put in place with one rename (atomic, never half
    there). Into an existing folder each file is moved with
    :func:`os.replace` (atomic). Files of the
    previous result that the new one does not have are removed only when the
    previous manifest lists them; anything else in ``target`` is kept. The
    manifest says ``"writing"`` until every file is in place.

    Parameters
    ----------
    build : str or path-like
        Made by :func:`make_build_folder`, sealed by :func:`seal_folder`.
    target : str or path-like
        The sample folder.

    Raises
    ------
    OutputRefusedError
        When ``target`` is a file, a link or a folder zoning did not create.
    """
    build, target = Path(build), Path(target)
    state = folder_state(target, legacy_sample=True)
    if state == "absent" and read_manifest(build) is not None:
        # A new folder: one rename puts the whole result in place at once.
        try:
            (build / _PARTIAL_MARK).unlink()
        except FileNotFoundError:
            pass
        try:
            os.rename(build, target)  # fails on an existing non-empty folder
            return
        except OSError:
            state = folder_state(target, legacy_sample=True)
    if state == "absent":
        try:
            os.mkdir(target)
            state = "empty"
        except FileExistsError:
            state = folder_state(target, legacy_sample=True)
    if state not in ("empty", "ours"):
        raise OutputRefusedError(
            f"refusing to replace {str(target)!r}: it is "
            f"{'a file or link' if state == 'file' else 'a folder zoning did not create'}"
            f"{_describe(target) if state == 'foreign' else ''}. Nothing in it was touched; "
            "rename it or choose another --out folder."
        )
    new = read_manifest(build)
    if new is None:
        raise ZoningError(f"internal: build folder {str(build)!r} was not sealed")
    old = _manifest_or_legacy(target) or {"files": {}, "folders": []}
    old_files = dict(old.get("files", {}))
    new_files = dict(new["files"])
    extra = {k: v for k, v in new.items() if k not in (
        "zoning_manifest", "kind", "status", "zoning_version", "written_utc", "created_folder",
        "files", "folders")}
    created = bool(old.get("created_folder", True)) if old_files else True
    folders = set(old.get("folders", [])) | set(new.get("folders", []))
    write_manifest(target, {**old_files, **new_files}, kind=new["kind"], status="writing",
                   created_folder=created, folders=folders, extra=extra)
    for rel in new_files:
        dest = target / rel
        if dest.parent != target:
            dest.parent.mkdir(parents=True, exist_ok=True)
        if os.path.lexists(dest) and (dest.is_symlink() or dest.is_dir()):
            raise OutputRefusedError(
                f"refusing to replace {str(dest)!r}: it is a link or a folder that zoning did "
                "not write. Move it away and run again."
            )
        os.replace(build / rel, dest)
    for rel in set(old_files) - set(new_files):
        stale = target / rel
        if stale.is_file() and not stale.is_symlink():
            stale.unlink()
    write_manifest(target, new_files, kind=new["kind"], status="complete",
                   created_folder=created, folders=new.get("folders", []), extra=extra)
    _remove_build(build)


def _remove_build(build: Path) -> None:
    """Remove a build folder made by :func:`make_build_folder` (all of it is zoning's)."""
    build = Path(build)
    if build.name.startswith(PARTIAL_PREFIX) and (
            (build / _PARTIAL_MARK).is_file() or _PARTIAL_NAME.match(build.name)):
        shutil.rmtree(build, ignore_errors=True)


def _start_id(pid: int) -> str:
    """Start time of a process (Linux /proc), to tell a reused pid apart; "" if unknown."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as handle:
            text = handle.read()
        return text.rsplit(")", 1)[1].split()[19]
    except (OSError, IndexError):
        return ""


def process_alive(pid: int, start_id: str = "", host: str = "") -> bool:
    """Whether process ``pid`` (started at ``start_id``, on ``host``) still runs.

    Parameters
    ----------
    pid : int
    start_id : str, optional
        From the record of the process; a different start time means the pid
        was reused.
    host : str, optional
        Host name of the record; a process on another host is assumed alive.

    Returns
    -------
    bool
    """
    if host and host != socket.gethostname():
        return True
    if not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:  # pragma: no cover - e.g. Windows without the process
        return False
    if _zombie(pid):
        return False  # ended, not yet reaped (e.g. its parent was killed too)
    if start_id:
        now = _start_id(pid)
        if now and now != start_id:
            return False
    return True


def _zombie(pid: int) -> bool:
    """Whether ``pid`` has ended but was not reaped yet (Linux /proc; False if unknown)."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] in ("Z", "X")
    except (OSError, IndexError):
        return False


def clean_partials(out_dir: str | os.PathLike) -> list[str]:
    """Remove build folders left by runs whose process is gone.

    Parameters
    ----------
    out_dir : str or path-like

    Returns
    -------
    list of str
        Names of the folders removed. Folders without zoning's marker, and
        those of a process still running, are left alone.
    """
    removed = []
    out_dir = Path(out_dir)
    for p in sorted(out_dir.glob(f"{PARTIAL_PREFIX}*")):
        if p.is_symlink() or not p.is_dir():
            continue
        named = _PARTIAL_NAME.match(p.name)
        mark = p / _PARTIAL_MARK
        info: dict[str, Any] = {}
        if mark.is_file():
            try:
                info = json.loads(mark.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                info = {}
        elif named is None:
            continue  # not made by make_build_folder: leave it alone
        if named is not None:
            info.setdefault("pid", int(named.group(1)))
            info.setdefault("start_id", named.group(2))
        if process_alive(info.get("pid", -1), info.get("start_id", ""), info.get("host", "")):
            continue
        shutil.rmtree(p, ignore_errors=True)
        removed.append(p.name)
    return removed


class OutputLock:
    """Exclusive lock of an output folder for one batch run.

    The lock is an OS file lock (``flock``) on ``<folder>/.zoning-lock``:
    the system releases it when the process ends, however it ends, so a
    lock can never be left behind by a killed run. The file also records who
    holds it (pid, host, start time, command) for the message a second run
    prints, and whether that run finished: a record that still says
    ``"running"`` when the lock is free means the previous run was killed,
    and :attr:`previous` tells the new run to repair what it left.

    Parameters
    ----------
    folder : str or path-like
        The output folder (must exist).
    wait : float, optional
        Seconds to wait for a running batch to finish before giving up
        (default 0: refuse at once).
    """

    def __init__(self, folder: str | os.PathLike, *, wait: float = 0.0):
        self.path = Path(folder) / LOCK_NAME
        self.wait = max(0.0, float(wait))
        self._fd: int | None = None
        self.previous: dict[str, Any] = {}
        self.record: dict[str, Any] = {}

    def _read(self) -> dict[str, Any]:
        try:
            data = json.loads(self.path.read_text(encoding="utf-8") or "{}")
        except (OSError, ValueError):
            return {}
        return data if isinstance(data, dict) else {}

    def acquire(self) -> OutputLock:
        """Take the lock, waiting as allowed.

        Raises
        ------
        OutputLockedError
            When another run holds it, naming that run.
        """
        if os.path.lexists(self.path) and (self.path.is_symlink() or not self.path.is_file()):
            raise OutputRefusedError(
                f"{str(self.path)!r} is not zoning's lock file. Move it away and run again."
            )
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        deadline = time.monotonic() + self.wait
        dead_grace = time.monotonic() + 30.0
        try:
            while True:
                if _try_lock(fd):
                    break
                holder = self._read()
                alive = process_alive(holder.get("pid", -1), holder.get("start_id", ""),
                                      holder.get("host", ""))
                now = time.monotonic()
                # A killed batch's workers may hold the lock for a few seconds
                # more while they notice and exit: wait for them.
                if now < deadline or (not alive and now < dead_grace):
                    time.sleep(0.2)
                    continue
                raise OutputLockedError(
                    f"another zoning batch is writing into {str(self.path.parent)!r}: "
                    f"pid {holder.get('pid', '?')} on {holder.get('host', '?')}, started "
                    f"{holder.get('started_utc', '?')} ({holder.get('command', '?')}). "
                    "Wait for it to finish (or give --wait SECONDS), stop it, or choose "
                    "another --out folder."
                )
        except BaseException:
            os.close(fd)
            raise
        self._fd = fd
        self.previous = self._read()
        self.record = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "start_id": _start_id(os.getpid()),
            "started_utc": _now(),
            "command": " ".join(["zoning", *sys.argv[1:]]) if sys.argv else "zoning",
            "state": "running",
            "workers": [],
        }
        self._store()
        return self

    @property
    def previous_unfinished(self) -> bool:
        """Whether the previous holder stopped without finishing (killed)."""
        return self.previous.get("state") == "running"

    def set_workers(self, pids: Iterable[int]) -> None:
        """Record the worker processes of this run (for the record only)."""
        self.record["workers"] = sorted(int(p) for p in pids)
        self._store()

    def _store(self) -> None:
        if self._fd is None:
            return
        data = (json.dumps(self.record, indent=2) + "\n").encode("utf-8")
        try:
            os.lseek(self._fd, 0, os.SEEK_SET)
            os.ftruncate(self._fd, 0)
            os.write(self._fd, data)
        except OSError:  # pragma: no cover - the record is informative only
            pass

    def release(self, state: str = "finished") -> None:
        """Record how the run ended and release the lock."""
        if self._fd is None:
            return
        self.record["state"] = state
        self.record["ended_utc"] = _now()
        self._store()
        _unlock(self._fd)
        os.close(self._fd)
        self._fd = None

    def __enter__(self) -> OutputLock:
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release("finished" if exc[0] is None else "stopped")


def _try_lock(fd: int) -> bool:
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows
        import msvcrt

        try:
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
            return True
        except OSError:
            return False
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        return True
    except BlockingIOError:
        return False
    except OSError as exc:
        if exc.errno in (errno.ENOLCK, errno.EOPNOTSUPP, errno.ENOSYS):
            # File system without locks (some network shares): go on unlocked.
            return True
        raise


def _unlock(fd: int) -> None:
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows
        import msvcrt

        try:
            os.lseek(fd, 0, os.SEEK_SET)
            msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)
        except OSError:
            pass
        return
    try:
        fcntl.flock(fd, fcntl.LOCK_UN)
    except OSError:  # pragma: no cover
        pass
