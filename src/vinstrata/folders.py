"""What the engine leaves on disk: whole files, whole model folders, one run per output folder.

Every writer goes through this module; nothing else renames, swaps or removes
output files.

* :func:`atomic_path` gives a temporary name beside a file; the file appears
  under its own name only once it is complete (``os.replace``), so a reader
  sees the old file or the new one, never a part.
* :func:`new_folder` builds a folder beside its final place and swaps it in
  whole (:func:`swap_folder`); :func:`recover_folder` puts back a folder that
  a swap interrupted between its two renames had set aside.
* :func:`held_back` keeps every rename of a block for its end, so that a
  command's files change together, in one short burst.
* :class:`OutputFolder` is one command's hold on its output folder: a lock
  file with the owner's pid, the removal of debris left by interrupted
  writers, and a manifest (``<command>_manifest.json``) of the files the
  command wrote with their SHA-256, size and the :class:`Identity` of the run
  they belong to. Files that manifests of another run list are removed when a
  command writes; files no manifest lists are never touched.

Temporary names start with ``.vinstrata-``, then the kind (``tmp`` a file
being written, ``new`` a folder being built, ``old`` a folder set aside by a
swap), the writer's pid and a token, then the final name. Debris of a writer
whose pid is gone is removed by the next writer of the same name or folder.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import json
import os
import re
import secrets
import shutil
import socket
import time
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Literal

from vinstrata.errors import InputError

try:  # POSIX: the kernel releases the lock of a process that dies, however it dies
    import fcntl
except ImportError:  # pragma: no cover - Windows: the lock file's pid decides
    fcntl = None  # type: ignore[assignment]

MANIFEST_VERSION = 1
MANIFEST_SUFFIX = "_manifest.json"
LOCK_NAME = ".vinstrata.lock"

_PREFIX = ".vinstrata-"
# the renames that held_back() will do when its block ends: (temporary, final)
_BATCH: ContextVar[list[tuple[Path, Path]] | None] = ContextVar("vinstrata_held_back",
                                                                default=None)
_DEBRIS = re.compile(r"^\.vinstrata-(tmp|new|old)-(\d+)-([0-9a-f]+)-(.+)$")


# --------------------------------------------------------------------------- names and pids


def _temp_name(kind: str, name: str) -> str:
    # the time first, in fixed width, so that sorting names sorts the asides by age
    return f"{_PREFIX}{kind}-{os.getpid()}-{time.time_ns():016x}{secrets.token_hex(2)}-{name}"


def pid_alive(pid: int) -> bool:
    """Whether process ``pid`` still runs on this machine.

    Parameters
    ----------
    pid : int

    Returns
    -------
    bool
        True also where it cannot be told (Windows, another user's process),
        so that nothing of a live writer is ever taken for debris.
    """
    if pid <= 0:
        return False
    if os.name == "nt":  # pragma: no cover - os.kill(pid, 0) would end the process there
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    return True


def _debris(folder: Path) -> list[tuple[Path, str, int, str]]:
    """Temporary entries in ``folder`` of writers that are gone: (path, kind, pid, final name)."""
    found = []
    try:
        entries = sorted(os.listdir(folder))
    except OSError:
        return []
    for entry in entries:
        match = _DEBRIS.match(entry)
        if match is None:
            continue
        pid = int(match.group(2))
        if pid == os.getpid() or pid_alive(pid):
            continue
        found.append((folder / entry, match.group(1), pid, match.group(4)))
    return found


def _remove(path: Path) -> None:
    """Remove a file or a folder; gone already is fine."""
    try:
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path)
        else:
            path.unlink()
    except FileNotFoundError:
        pass


def clean_debris(folder: str | Path, name: str | None = None) -> None:
    """Remove what interrupted writers left in ``folder`` (only of ``name`` when given).

    A folder set aside by a swap is put back first when its final name is
    missing (:func:`recover_folder`); otherwise it is a leftover and removed.

    Parameters
    ----------
    folder : str or Path
    name : str, optional
        Only the debris of this final name.
    """
    folder = Path(folder)
    for path, kind, _, final in _debris(folder):
        if name is not None and final != name:
            continue
        if kind == "old" and not os.path.lexists(folder / final):
            recover_folder(folder / final)
        if path.exists():
            _remove(path)


def _fsync(path: Path) -> None:
    # durability against a power cut; a killed process needs only the rename
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _fsync_folder(folder: Path) -> None:
    if os.name != "nt":
        _fsync(folder)


# --------------------------------------------------------------------------- files


@contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """A temporary path beside ``path``; renamed onto ``path`` when the block ends well.

    The temporary name ends with the final name, so writers that add or check
    a suffix (``np.save``, matplotlib) treat it alike. On an error, or
    Ctrl-C, the temporary file is removed and ``path`` keeps what it held.

    Parameters
    ----------
    path : str or Path
        The file to write; its folder is created.

    Yields
    ------
    Path
        Where to write the content.

    Raises
    ------
    InputError
        ``path`` is a folder, or its folder cannot be written.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{path}: is a folder; give a file name")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except (PermissionError, FileExistsError, NotADirectoryError) as exc:
        raise InputError(f"{path.parent}: cannot write here ({exc.strerror})") from None
    clean_debris(path.parent, path.name)
    temp = path.with_name(_temp_name("tmp", path.name))
    pending = _BATCH.get()
    try:
        yield temp
        _fsync(temp)
        if pending is not None:
            pending.append((temp, path))
            return
        os.replace(temp, path)
    except PermissionError as exc:
        _remove(temp)
        raise InputError(f"{path}: cannot write ({exc.strerror})") from None
    except BaseException:
        _remove(temp)
        raise
    _fsync_folder(path.parent)


def write_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` whole (see :func:`atomic_path`).

    Parameters
    ----------
    path : str or Path
    data : bytes

    Returns
    -------
    Path
    """
    path = Path(path)
    with atomic_path(path) as temp:
        temp.write_bytes(data)
    return path


def json_text(data: Any) -> str:
    """The engine's JSON: sorted keys, two-space indent, a final newline (same data, same bytes)."""
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def write_json(path: str | Path, data: Any) -> Path:
    """Write ``data`` as the engine's JSON (:func:`json_text`) to ``path`` whole.

    Parameters
    ----------
    path : str or Path
    data : JSON-serialisable

    Returns
    -------
    Path
    """
    return write_bytes(path, json_text(data).encode("utf-8"))


def sha256_bytes(data: bytes) -> str:
    """The hex SHA-256 of ``data``."""
    return hashlib.sha256(data).hexdigest()


def sha256_file(path: str | Path) -> str:
    """The hex SHA-256 of a file, read in blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def file_entry(path: str | Path, parts: bool = False) -> dict[str, Any]:
    """``{"sha256", "size"}`` of a file; of a folder, a hash over its files' names and hashes.

    Parameters
    ----------
    path : str or Path
    parts : bool
        For a folder, also list each of its files (``"files"``: name -> sha256 and
        size), so that a later run can remove them one by one (a dataset, such as
        ``placements/`` of ``place --engine dask``).

    Returns
    -------
    dict
    """
    path = Path(path)
    if not path.is_dir():
        return {"sha256": sha256_file(path), "size": path.stat().st_size}
    lines, size, files = [], 0, {}
    # hidden names (a file browser's .DS_Store) are not part of what was written
    items = (p for p in path.rglob("*") if p.is_file()
             and not any(part.startswith(".") for part in p.relative_to(path).parts))
    for item in sorted(items):
        entry = file_entry(item)
        size += entry["size"]
        files[item.relative_to(path).as_posix()] = entry
        lines.append(f"{item.relative_to(path).as_posix()}\t{entry['sha256']}\t{entry['size']}\n")
    whole = {"sha256": sha256_bytes("".join(lines).encode("utf-8")), "size": size}
    return {**whole, "files": files} if parts else whole


# --------------------------------------------------------------------------- folders


def recover_folder(target: str | Path, wait: float = 0.0) -> bool:
    """Put back a folder that an interrupted :func:`swap_folder` left set aside.

    Between a swap's two renames ``target`` is missing and the complete old
    folder waits beside it under an ``old`` name. When its writer is gone the
    newest such folder is renamed back; when its writer still runs (a swap in
    progress) this waits up to ``wait`` seconds for ``target`` to appear.

    Parameters
    ----------
    target : str or Path
    wait : float
        Seconds to wait for a live writer's swap to finish.

    Returns
    -------
    bool
        Whether ``target`` exists afterwards.
    """
    target = Path(target)
    deadline = time.monotonic() + wait
    while True:
        if os.path.lexists(target):
            return True
        gone, live = [], False
        for entry in sorted(os.listdir(target.parent)) if target.parent.is_dir() else []:
            match = _DEBRIS.match(entry)
            if match and match.group(1) == "old" and match.group(4) == target.name:
                pid = int(match.group(2))
                if pid != os.getpid() and not pid_alive(pid):
                    gone.append((match.group(3), entry))
                else:
                    live = True
        if not live:
            # the newest aside is the folder last in place; older ones are leftovers of
            # swaps that went through and whose removal was cut short
            for _, entry in sorted(gone, reverse=True):
                with contextlib.suppress(OSError):  # another reader may have put it back
                    os.rename(target.parent / entry, target)
                if os.path.lexists(target):
                    _fsync_folder(target.parent)
                    return True
            return os.path.lexists(target)
        if time.monotonic() >= deadline:
            return False
        time.sleep(0.02)


def swap_folder(build: str | Path, target: str | Path) -> Path:
    """Replace ``target`` with the complete folder ``build`` (both in one parent).

    The old folder is renamed aside, ``build`` renamed into its place, and the
    old one removed. Each rename is atomic, so a reader sees the old folder or
    the new one; a process killed between the two renames leaves the old one
    aside, and :func:`recover_folder` (called by :func:`load_model
    <vinstrata.segment.model.load_model>` and by the next swap) puts it back.

    Parameters
    ----------
    build, target : str or Path

    Returns
    -------
    Path
        ``target``.
    """
    build, target = Path(build), Path(target)
    recover_folder(target)
    if not os.path.lexists(target):
        os.rename(build, target)
        _fsync_folder(target.parent)
        return target
    aside = target.with_name(_temp_name("old", target.name))
    os.rename(target, aside)
    try:
        os.rename(build, target)
    except BaseException:
        os.rename(aside, target)
        raise
    _fsync_folder(target.parent)
    _remove(aside)
    return target


@contextmanager
def new_folder(target: str | Path) -> Iterator[Path]:
    """An empty folder beside ``target``, swapped in as ``target`` when the block ends well.

    Parameters
    ----------
    target : str or Path
        The folder to (re)place; its parent is created.

    Yields
    ------
    Path
        The folder to fill.
    """
    target = Path(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except (PermissionError, FileExistsError, NotADirectoryError) as exc:
        raise InputError(f"{target.parent}: cannot write here ({exc.strerror})") from None
    clean_debris(target.parent, target.name)
    build = target.with_name(_temp_name("new", target.name))
    build.mkdir()
    pending = _BATCH.get()
    handed = False
    try:
        yield build
        for item in build.iterdir():
            _fsync(item)
        _fsync_folder(build)
        if pending is not None:
            pending.append((build, target))
            handed = True
        else:
            swap_folder(build, target)
    finally:
        if not handed and build.exists():
            _remove(build)


@contextmanager
def held_back() -> Iterator[None]:
    """Hold back the renames of the files and folders written inside the block.

    Everything written in the block stays under its temporary name until the
    block ends well; then all of it is renamed into place in one burst (files
    with ``os.replace``, folders with :func:`swap_folder`). A command that
    writes its results inside one block thus changes its output folder only
    in the few milliseconds of that burst: interrupted while it writes, it
    leaves the previous results whole. On an error, or Ctrl-C, the temporary
    files and folders are removed. Nested blocks join the outer one.
    """
    if _BATCH.get() is not None:
        yield
        return
    pending: list[tuple[Path, Path]] = []
    token = _BATCH.set(pending)
    try:
        yield
    except BaseException:
        for temp, _ in pending:
            _remove(temp)
        raise
    finally:
        _BATCH.reset(token)
    try:
        for temp, final in pending:
            if temp.is_dir():
                swap_folder(temp, final)
            else:
                os.replace(temp, final)
    finally:
        for temp, _ in pending:
            if os.path.lexists(temp):
                _remove(temp)
    for parent in sorted({final.parent for _, final in pending}):
        _fsync_folder(parent)


# --------------------------------------------------------------------------- the lock


class FolderLock:
    """A lock file in an output folder naming its owner: pid, host and command.

    On POSIX the file is held with ``flock``, which the kernel releases when
    the owner dies however it dies, so a lock file left by a killed owner is
    simply taken over; elsewhere the file's pid is checked instead.
    """

    def __init__(self, folder: Path, command: str) -> None:
        self.path = folder / LOCK_NAME
        self.command = command
        self._fd: int | None = None

    def _owner_text(self) -> str:
        try:
            owner = json.loads(self.path.read_text(encoding="utf-8"))
            return (f"{owner.get('command', 'vinstrata')}, pid {owner.get('pid', '?')} on "
                    f"{owner.get('host', '?')}")
        except (OSError, ValueError, AttributeError):
            return "pid unknown"

    def _refuse(self) -> InputError:
        return InputError(f"{self.path.parent}: another vinstrata command ({self._owner_text()}) "
                          "is writing into this folder; wait for it to end or give another "
                          "folder")

    def acquire(self) -> None:
        """Take the lock, or refuse at once with one line naming the owner.

        Raises
        ------
        InputError
            Another live process holds the lock.
        """
        owner = json_text({"command": self.command, "host": socket.gethostname(),
                           "pid": os.getpid()}).encode("utf-8")
        for _ in range(50):
            if fcntl is None:  # pragma: no cover - Windows
                fd = self._acquire_by_pid()
            else:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                except OSError as exc:
                    os.close(fd)
                    if exc.errno in (errno.EAGAIN, errno.EACCES, errno.EWOULDBLOCK):
                        raise self._refuse() from None
                    raise
                # the owner before us may have removed the file between our open and our
                # lock: then we hold a file nobody else sees, and try again
                try:
                    same = os.stat(self.path).st_ino == os.fstat(fd).st_ino
                except FileNotFoundError:
                    same = False
                if not same:
                    os.close(fd)
                    continue
            os.ftruncate(fd, 0)
            os.write(fd, owner)
            self._fd = fd
            return
        raise self._refuse()

    def _acquire_by_pid(self) -> int:  # pragma: no cover - Windows
        while True:
            try:
                return os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
            except FileExistsError:
                try:
                    owner = json.loads(self.path.read_text(encoding="utf-8"))
                except (OSError, ValueError):
                    owner = {}
                if owner.get("host") == socket.gethostname() and not pid_alive(
                        int(owner.get("pid", 0))):
                    with contextlib.suppress(FileNotFoundError):
                        self.path.unlink()
                    continue
                raise self._refuse() from None

    def release(self) -> None:
        """Remove the lock file and let go of it (a second call does nothing)."""
        if self._fd is None:
            return
        with contextlib.suppress(OSError):
            if os.stat(self.path).st_ino == os.fstat(self._fd).st_ino:
                self.path.unlink()
        os.close(self._fd)
        self._fd = None


# --------------------------------------------------------------------------- manifests


@dataclass(frozen=True)
class Identity:
    """The run a set of results belongs to.

    Parameters
    ----------
    input_sha256 : str
        SHA-256 of the training lot file (of the checked file for ``check``).
    seed : int, optional
        The seed of the fit.
    model : str
        The model's fingerprint (SHA-256 of its ``model.json``); empty for
        results made without a model (``check``).
    """

    input_sha256: str
    seed: int | None = None
    model: str = ""

    def same_run(self, other: Identity) -> bool:
        """Whether results of ``self`` and ``other`` belong together.

        Two results with a model belong together when the model is the same;
        data-quality files (no model) go with any result of the same lot file.
        """
        if self.model and other.model:
            return self.model == other.model
        return self.input_sha256 == other.input_sha256

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Identity:
        seed = data.get("seed")
        return cls(input_sha256=str(data.get("input_sha256", "")),
                   seed=None if seed is None else int(seed), model=str(data.get("model", "")))

    def describe(self) -> str:
        """A short name for messages: the model's fingerprint, or the lot file's."""
        return f"model {self.model[:12]}" if self.model else f"lot file {self.input_sha256[:12]}"


def manifest_name(command: str) -> str:
    """The manifest file a command writes into its output folder."""
    return f"{command}{MANIFEST_SUFFIX}"


def read_manifest(path: str | Path) -> dict[str, Any] | None:
    """An engine manifest, or None for a file that is not one (left alone).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict or None
    """
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if (not isinstance(data, dict) or data.get("manifest_version") != MANIFEST_VERSION
            or not isinstance(data.get("files"), dict) or not isinstance(data.get("identity"),
                                                                          dict)):
        return None
    try:
        Identity.from_dict(data["identity"])
        for entry in data["files"].values():
            Identity.from_dict(entry.get("identity") or {})
    except (AttributeError, TypeError, ValueError):
        return None
    return data


Replace = Literal["stale", "all", "none"]


class OutputFolder:
    """One command's hold on its output folder, from the lock to the manifest.

    Use as a context manager around the whole command: entering creates the
    folder, takes the lock (:class:`FolderLock`) and removes debris of writers
    that are gone; leaving releases the lock (also on an error or Ctrl-C) and
    removes the folder again when it was created here and is still empty.
    Between them, :meth:`claim` refuses early what :meth:`commit` could not do
    safely, and :meth:`commit` records what the command wrote.

    Parameters
    ----------
    path : str or Path
        The output folder.
    command : str
        The command's name: ``check``, ``segment``, ``profile``, ``place``,
        ``brief`` or ``run``; names the manifest.
    """

    def __init__(self, path: str | Path, command: str) -> None:
        self.path = Path(path)
        self.command = command
        self._lock = FolderLock(self.path, command)
        self._created = False

    def __enter__(self) -> OutputFolder:
        if self.path.exists() and not self.path.is_dir():
            raise InputError(f"{self.path}: is a file, not a folder")
        if (self.path / "model.json").is_file():
            # a model folder holds its own files only; anything added would spoil it
            raise InputError(f"{self.path}: is a model folder; write into another folder, "
                             "such as the one that holds it")
        try:
            self._created = not self.path.exists()
            self.path.mkdir(parents=True, exist_ok=True)
            self._lock.acquire()
        except PermissionError as exc:
            raise InputError(f"{self.path}: cannot write here ({exc.strerror})") from None
        try:
            clean_debris(self.path)
        except BaseException:
            self._lock.release()
            raise
        return self

    def __exit__(self, *exc: object) -> None:
        self._lock.release()
        if self._created:
            with contextlib.suppress(OSError):  # not empty: something was written
                self.path.rmdir()

    # ------------------------------------------------------------------ reading

    def manifests(self) -> list[tuple[Path, dict[str, Any]]]:
        """The engine manifests in the folder, by name."""
        found = []
        for path in sorted(self.path.glob(f"*{MANIFEST_SUFFIX}")):
            data = read_manifest(path)
            if data is not None:
                found.append((path, data))
        return found

    @staticmethod
    def _identity(manifest: dict[str, Any], entry: dict[str, Any]) -> Identity:
        return Identity.from_dict(entry.get("identity") or manifest["identity"])

    def _key(self, path: Path) -> str:
        path = Path(path)
        try:
            key = path.resolve().relative_to(self.path.resolve()).as_posix()
        except ValueError:
            raise ValueError(f"{path} is not inside {self.path}") from None
        return key + "/" if path.is_dir() else key

    def _inside(self, key: str) -> Path | None:
        """The path a manifest key names, or None when it would lead out of the folder."""
        parts = Path(key.rstrip("/")).parts
        if not parts or Path(key).is_absolute() or ".." in parts:
            return None
        path = self.path / key.rstrip("/")
        try:  # a folder in between may be a link to elsewhere
            path.parent.resolve().relative_to(self.path.resolve())
        except (OSError, ValueError):
            return None
        return path

    def _remove_listed(self, key: str, entry: dict[str, Any]) -> None:
        """Remove a listed file, or a listed folder that still holds what is listed."""
        path = self._inside(key)
        if path is None:
            return
        if not key.endswith("/"):
            if not path.is_dir() or path.is_symlink():
                _remove(path)
        elif self._holds(key, entry):
            _remove(path)
        elif isinstance(entry.get("files"), dict) and path.is_dir() and not path.is_symlink():
            # a dataset changed since: its listed parts still as written go, the rest stays
            for name, part in sorted(entry["files"].items()):
                listed = self._inside(f"{key}{name}")
                if listed is not None and listed.is_file() and file_entry(listed) == {
                        "sha256": part.get("sha256"), "size": part.get("size")}:
                    _remove(listed)
            with contextlib.suppress(OSError):  # not empty: files no manifest lists
                path.rmdir()

    def _holds(self, key: str, entry: dict[str, Any]) -> bool:
        """Whether the folder still holds what ``entry`` lists under ``key``."""
        path = self._inside(key)
        if path is None or key.endswith("/") != path.is_dir() or not path.exists():
            return False
        current = file_entry(path)
        return current["sha256"] == entry.get("sha256") and current["size"] == entry.get("size")

    # ------------------------------------------------------------------ claiming

    def claim(self, identity: Identity) -> None:
        """Refuse, before any work, to write beside another run's folder (its ``model/``).

        :meth:`commit` removes the files of another run, but it never removes
        a whole folder it did not write: a command that writes no model into a
        folder that holds another run's model stops here instead.

        Parameters
        ----------
        identity : Identity
            The run of the results about to be written.

        Raises
        ------
        InputError
            Another run's folder is in the output folder.
        """
        for path, data in self.manifests():
            for key, entry in sorted(data["files"].items()):
                other = self._identity(data, entry)
                if key.endswith("/") and not other.same_run(identity) and self._holds(key, entry):
                    raise InputError(
                        f"{self.path}: holds {key} of another run ({other.describe()}, listed in "
                        f"{path.name}), which {self.command} would leave beside results of "
                        f"{identity.describe()}; give another output folder")

    # ------------------------------------------------------------------ committing

    def commit(self, identity: Identity, paths: Iterable[str | Path],
               replace: Replace = "stale") -> Path:
        """Record what the command wrote and remove what no longer belongs.

        Every file (or folder) in ``paths`` is listed in this command's
        manifest, with its SHA-256 and size, and taken off any other manifest
        of the folder. Then, by ``replace``:

        ``"stale"``
            files listed in manifests of another run (:meth:`Identity.same_run`
            false), and files of this command's previous manifest that it did
            not write again, are removed;
        ``"all"``
            every listed file not written again is removed (``run``: the
            folder then holds this run only);
        ``"none"``
            nothing is removed, and this command's earlier entries are kept,
            each with its own identity (``brief``: one file among others).

        Only listed files are ever removed, and a listed folder only while it
        still holds what its entry says.

        Parameters
        ----------
        identity : Identity
        paths : iterable of str or Path
            Inside the folder.
        replace : {"stale", "all", "none"}

        Returns
        -------
        Path
            The manifest written.
        """
        # a folder other than a model is a dataset: its parts are listed one by one
        written = {self._key(Path(p)): file_entry(p, parts=Path(p).is_dir()
                                                  and not (Path(p) / "model.json").exists())
                   for p in paths}
        own = self.path / manifest_name(self.command)
        carried: dict[str, dict[str, Any]] = {}
        for path, data in self.manifests():
            mine = path == own
            kept = {}
            for key, entry in data["files"].items():
                if key in written:
                    continue
                other = self._identity(data, entry)
                if replace == "none":
                    if not mine:
                        kept[key] = entry
                    elif (listed := self._inside(key)) is not None and os.path.lexists(listed):
                        carried[key] = {**entry, "identity": other.to_dict()}
                elif replace == "all" or mine or not other.same_run(identity):
                    self._remove_listed(key, entry)
                else:
                    kept[key] = entry
            if mine or kept == data["files"]:
                continue
            if kept:
                write_json(path, {**data, "files": kept})
            else:
                _remove(path)
        if replace == "none":
            written = {key: {**entry, "identity": identity.to_dict()}
                       for key, entry in written.items()}
        from vinstrata import __version__

        return write_json(own, {
            "command": self.command, "files": {**carried, **written},
            "identity": identity.to_dict(), "manifest_version": MANIFEST_VERSION,
            "vinstrata": __version__,
        })
