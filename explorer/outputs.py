"""Writing output files so that an input is never destroyed and a broken file is never left behind.

Every command that writes files goes through here:

    plan = OutputPlan(inputs=[spec_path, *input_paths(spec)])
    json_path = plan.add("--json", args.json)        # refused when it is an input, another output,
    html_path = plan.add("--html", args.html)        # a folder, a FIFO or device, or cannot be written
    ... the long work ...
    plan.write(json_path, text)                      # temporary file beside the target, then renamed

`plan.written` lists what is in place, so a command stopped half-way can say what it wrote. Every
operating-system error becomes a FulcrumError naming the file and what to do.
"""
from __future__ import annotations

import dataclasses
import errno
import os
import stat
import tempfile
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from .errors import FulcrumError

_WHY = {
    errno.EACCES: "permission denied",
    errno.EPERM: "the operation is not permitted",
    errno.ENOSPC: "the disk is full",
    errno.EDQUOT: "the disk quota is used up",
    errno.EROFS: "the file system is read-only",
    errno.EISDIR: "a folder has that name",
    errno.ENOTDIR: "part of the path is a file, not a folder",
    errno.ENOENT: "the folder does not exist",
    errno.ENAMETOOLONG: "the name is too long",
    errno.EXDEV: "the temporary file and the target are on different disks",
}


def os_error(exc: OSError, path: str | Path, doing: str, flag: str | None = None) -> FulcrumError:
    """An operating-system error as the project's error: what was being done, to which file, why, what to do."""
    why = _WHY.get(exc.errno or 0, exc.strerror or str(exc))
    hint = {errno.ENOSPC: "Free some space on that disk or write somewhere else.",
            errno.EDQUOT: "Free some space on that disk or write somewhere else.",
            errno.EACCES: "Choose a folder you can write to, or change its permissions.",
            errno.EPERM: "Choose a folder you can write to, or change its permissions.",
            errno.EROFS: "Choose a folder on a writable disk."}.get(exc.errno or 0,
                                                                  "Check the path and choose another if needed.")
    where = f" (given to {flag})" if flag else ""
    return FulcrumError(f"could not {doing}{where}: {why}.", file=str(path), hint=hint)


def _same(a: Path, b: Path) -> bool:
    """Whether two paths name one file: equal after resolving links, or the same file on disk (hard links)."""
    if a.resolve() == b.resolve():
        return True
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def input_paths(obj: Any) -> list[Path]:
    """Every file path a spec (or any tree of dataclasses, lists and dicts) names: the files a command reads."""
    found: list[Path] = []

    def walk(v: Any) -> None:
        if isinstance(v, Path):
            found.append(v)
        elif dataclasses.is_dataclass(v) and not isinstance(v, type):
            for f in dataclasses.fields(v):
                walk(getattr(v, f.name))
        elif isinstance(v, (list, tuple)):
            for x in v:
                walk(x)
        elif isinstance(v, dict):
            for x in v.values():
                walk(x)

    walk(obj)
    return found


def check_writable(path: Path, flag: str | None = None) -> None:
    """Refuse a target that cannot take a regular file: a folder, a FIFO or device, a read-only file, a missing
    or unwritable folder. Checked before any long work, by creating and removing a temporary file beside it."""
    shown = str(path)
    where = f" (given to {flag})" if flag else ""
    try:
        st = path.stat()
    except FileNotFoundError:
        st = None
    except OSError as exc:
        raise os_error(exc, shown, "check the output file", flag) from None
    if st is not None:
        if stat.S_ISDIR(st.st_mode):
            raise FulcrumError(f"the output path{where} is a folder, not a file.", file=shown,
                               hint="Give a file name inside the folder, e.g. results.json.")
        if not stat.S_ISREG(st.st_mode):
            kind = "a named pipe (FIFO)" if stat.S_ISFIFO(st.st_mode) else \
                "a device" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else "not a regular file"
            raise FulcrumError(f"the output path{where} is {kind}, not a regular file.", file=shown,
                               hint="Give the name of an ordinary file.")
        if not os.access(path, os.W_OK):
            raise FulcrumError(f"the output file{where} is read-only, so it is not replaced.", file=shown,
                               hint="Choose another name, or make the file writable if it may be replaced.")
    folder = path.resolve().parent
    if not folder.is_dir():
        raise FulcrumError(f"the folder for the output{where} does not exist." if not folder.exists() else
                           f"the output's folder{where} is not a folder.", file=shown,
                           hint=f"Create the folder {folder} first, or write somewhere else.")
    try:
        with tempfile.NamedTemporaryFile(dir=folder, prefix=f".{path.name[:40]}.", suffix=".check"):
            pass
    except OSError as exc:
        raise os_error(exc, shown, "write into the output's folder", flag) from None


def write_atomic(path: str | Path, data: str | bytes, flag: str | None = None) -> Path:
    """Write `data` to a temporary file beside `path`, flush it to disk and rename it into place, so `path`
    holds either its old content or all of the new, never part of it. A link is followed (the link stays).
    Text is written as UTF-8. Returns the path written."""
    path = Path(path)
    target = path.resolve() if path.is_symlink() else path
    payload = data.encode("utf-8") if isinstance(data, str) else data
    check_writable(target, flag)
    try:
        mode = stat.S_IMODE(target.stat().st_mode)  # a replaced file keeps its permissions
    except OSError:
        mode = 0o644
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(dir=target.resolve().parent, prefix=f".{target.name[:40]}.", suffix=".part")
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, target)
        tmp = None
    except OSError as exc:
        raise os_error(exc, path, "write the file", flag) from None
    finally:  # also on KeyboardInterrupt: no partial file is left
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass
    return path


def make_folder(path: str | Path) -> Path:
    """Create a folder (and its parents) for outputs; a file in the way or a refusal becomes a FulcrumError."""
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise FulcrumError("the output folder's name is taken by a file.", file=str(path),
                           hint="Give the name of a folder (it is created when missing).")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise os_error(exc, path, "create the folder") from None
    return path


class OutputPlan:
    """The output files of one command, checked before the work starts and written safely after it."""

    def __init__(self, inputs: Iterable[str | Path] = ()) -> None:
        self.inputs = [Path(p) for p in inputs if p is not None]
        self.planned: dict[Path, str] = {}
        self.written: list[Path] = []

    def inputs_from(self, *paths: str | Path | None) -> OutputPlan:
        """Add input files (the spec, the files it names) that no output may replace; returns the plan."""
        self.inputs.extend(Path(p) for p in paths if p is not None)
        return self

    def add(self, flag: str, path: str | Path | None) -> Path | None:
        """Check one output (None: not asked for) against the inputs, the other outputs and the disk."""
        if path is None:
            return None
        path = Path(path)
        if not str(path).strip():
            raise FulcrumError(f"{flag} was given an empty file name.", hint=f"Give {flag} a file name.")
        if "\x00" in str(path):
            raise FulcrumError(f"the file name given to {flag} holds a NUL character, which no file name can hold.",
                               hint=f"Give {flag} an ordinary file name.")
        for src in self.inputs:
            if src.exists() and _same(path, src) or path.resolve() == src.resolve():
                raise FulcrumError(f"the output given to {flag} is one of the input files, which would be "
                                   "overwritten.", file=str(path),
                                   hint=f"Give {flag} a new file name; inputs are never overwritten.")
        for other, other_flag in self.planned.items():
            if path.resolve() == other.resolve() or (path.exists() and other.exists() and _same(path, other)):
                raise FulcrumError(f"{flag} and {other_flag} name the same file.", file=str(path),
                                   hint="Give each output its own file name.")
        check_writable(path, flag)
        self.planned[path] = flag
        return path

    def write(self, path: Path | None, data: str | bytes) -> None:
        if path is None:
            return
        write_atomic(path, data, self.planned.get(path))
        self.written.append(path)

    def summary(self) -> str:
        """'Written: a.json.' or 'Nothing was written.' (for a command that stopped half-way)."""
        if not self.written:
            return "Nothing was written."
        return "Written: " + ", ".join(str(p) for p in self.written) + "; nothing else was written."
