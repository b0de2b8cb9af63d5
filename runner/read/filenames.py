"""File names built from stored text (model labels, sweep ids), made safe to write.

Labels and sweep ids arrive from stores that others wrote (a merged store, a team store),
so they are untrusted: they may hold path separators, `..`, NUL and control characters,
names that Windows reserves, or run to any length. `safe_component` turns any text into
one file-name component that is none of those; `safe_names` does so for a set of texts
with no two results equal, even on a case-insensitive file system; `inside` joins a
component to a folder and refuses a result that resolves outside it (a symlink planted
in the folder, say). Every file foldwise writes passes the writing helpers below:
`check_folder`, `make_folder` and `check_replaceable` refuse in one paragraph
(OutputError), and `write_whole` writes a set of files through temporaries, all moved into
place or none. Only the standard library is used, so the CLI stays light."""

from __future__ import annotations

import contextlib

import hashlib
import os
import tempfile
import unicodedata
from pathlib import Path
from typing import Iterable, Sequence

from ..errors import OutputError, QueryError

__all__ = ["safe_component", "safe_names", "inside", "MAX_BYTES", "WINDOWS_RESERVED",
           "new_file_mode", "file_in_path", "check_folder", "make_folder", "check_replaceable", "stage_files",
           "move_into_place", "discard_staged", "write_whole"]

MAX_BYTES = 80
"""Longest component in UTF-8 bytes, hash suffix included; far below the usual 255-byte
limit, so a sweep id, a kind and an extension still fit around it."""

_HASH_CHARS = 12
_KEPT_CATEGORIES = {"Lu", "Ll", "Lt", "Lm", "Lo", "Nd"}  # letters and decimal digits
_KEPT_ASCII = set("-_.")

WINDOWS_RESERVED = frozenset(
    ["con", "prn", "aux", "nul", "conin$", "conout$"]
    + [f"{dev}{n}" for dev in ("com", "lpt") for n in [*"123456789", "¹", "²", "³"]])
"""Device names Windows will not use as a file name, with or without an extension."""


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:_HASH_CHARS]


def _clip(text: str, max_bytes: int) -> str:
    """The longest prefix of `text` that is at most `max_bytes` in UTF-8."""
    return text.encode("utf-8")[:max_bytes].decode("utf-8", "ignore")


def _cleaned(text: str) -> str:
    """Every character outside letters, digits, '-', '_' and '.' becomes '_'; no leading
    '.' or '-', no trailing '.', no run of dots."""
    kept = "".join(ch if ch in _KEPT_ASCII or (ch.isascii() and ch.isalnum())
                   or (not ch.isascii() and unicodedata.category(ch) in _KEPT_CATEGORIES)
                   else "_" for ch in text)
    while ".." in kept:
        kept = kept.replace("..", "_.")
    if kept[:1] in (".", "-"):
        kept = "_" + kept[1:]
    if kept.endswith("."):
        kept = kept[:-1] + "_"
    if kept.split(".", 1)[0].casefold() in WINDOWS_RESERVED:
        kept = "_" + kept
    return kept


def safe_component(text: object, *, max_bytes: int = MAX_BYTES) -> str:
    """`text` as one safe file-name component.

    Text that is already safe (ASCII or Unicode letters and digits, '-', '_', '.', not
    starting with '.' or '-', no '..', no reserved device name, short enough) is kept as
    is; anything else is cleaned and, when it had to change, gets '-' and the first 12 hex
    digits of the SHA-256 of the original text, so two texts that clean alike still give
    different names."""
    text = str(text)
    normal = unicodedata.normalize("NFC", text)
    cleaned = _cleaned(normal)
    if cleaned == text and 0 < len(cleaned.encode("utf-8")) <= max_bytes:
        return cleaned
    suffix = f"-{_digest(text)}"
    stem = _clip(cleaned, max_bytes - len(suffix)).rstrip(".") or "_"
    return stem + suffix


def safe_names(texts: Iterable[object], *, max_bytes: int = MAX_BYTES) -> dict[str, str]:
    """A safe component per distinct text (in order), no two equal ignoring case.

    A text whose component an earlier text already took (a label crafted to look like
    another's cleaned name, or 'Tree' beside 'tree' on a case-insensitive disk) gets its
    hash suffix, then a counter if it still clashes."""
    names: dict[str, str] = {}
    taken: set[str] = set()
    for text in dict.fromkeys(str(t) for t in texts):
        name = safe_component(text, max_bytes=max_bytes)
        if name.casefold() in taken and not name.endswith(f"-{_digest(text)}"):
            suffix = f"-{_digest(text)}"
            name = _clip(name, max_bytes - len(suffix)) + suffix
        base, n = name, 2
        while name.casefold() in taken:
            tail = f"-{n}"
            name = _clip(base, max_bytes - len(tail)) + tail
            n += 1
        taken.add(name.casefold())
        names[text] = name
    return names


def inside(folder: str | Path, name: str) -> Path:
    """`folder / name`, after checking that `name` is one component and that the path
    resolves inside the folder (symlinks followed); a QueryError otherwise."""
    folder = Path(folder)
    if not name or name in (".", "..") or "/" in name or "\\" in name or "\0" in name:
        raise QueryError(f"refused to write {name!r} in {folder}: a file name built from "
                         "stored text must be one plain name.")
    path = folder / name
    root = folder.resolve()
    if not path.resolve().is_relative_to(root) or path.resolve() == root:
        raise QueryError(f"refused to write {path}: it resolves to {path.resolve()}, outside "
                         f"{root} (a link there points elsewhere). Remove the link or choose "
                         "another folder.")
    return path


def new_file_mode() -> int:
    """The mode a file created by `open` gets under this process's umask (0o666 less it):
    files written through a private temporary file take it before they are moved into
    place, so a team can read what was handed on."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def file_in_path(path: str | Path) -> Path | None:
    """The first part of `path`'s folders (from the top) that exists and is not a folder."""
    for part in reversed(Path(path).parents):
        if part.exists() and not part.is_dir():
            return part
    return None


def check_folder(folder: str | Path, what: str, hint: str) -> None:
    """Refuse a folder path one of whose parts is a file, before anything is made: an
    OutputError '<what> cannot be written: ... <hint>' that names that file."""
    folder = Path(folder)
    part = folder if folder.exists() and not folder.is_dir() else file_in_path(folder)
    if part is not None:
        raise OutputError(f"{what} cannot be written: a part of its folder is a file "
                          f"({part}). {hint}")


def make_folder(folder: str | Path, what: str, hint: str) -> list[Path]:
    """Create `folder` and its parents, refused as `check_folder` refuses. Returns the
    folders it made, deepest first, so a caller that then fails can take them away."""
    check_folder(folder, what, hint)
    folder = Path(folder)
    made = [p for p in (folder, *folder.parents) if not p.exists()]
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError):  # a file put there since the check
        check_folder(folder, what, hint)
        raise
    return made


def remove_made_folders(made: Sequence[Path]) -> None:
    """Take away the folders `make_folder` made, deepest first, where they are still empty."""
    for empty in made:
        with contextlib.suppress(OSError):
            empty.rmdir()


def check_replaceable(path: str | Path, mark: bytes, kind: str, hint: str) -> None:
    """Refuse to replace `path` unless it is absent or an earlier `kind` foldwise wrote
    (`mark` in its first 4 KiB): a store, a spec or a data file named by mistake would be
    lost."""
    path = Path(path)
    if not path.exists():
        return
    if path.is_dir():
        raise OutputError(f"{kind} {path} is a folder, not a file. {hint}")
    with open(path, "rb") as f:
        head = f.read(4096)
    if mark not in head:
        raise OutputError(f"{path} exists and is not a foldwise {kind}, so it is not "
                          f"replaced (foldwise replaces only an earlier {kind} it wrote). "
                          f"{hint}")


def stage_files(files: Sequence[tuple[Path, bytes]], prefix: str) -> list[tuple[Path, Path]]:
    """Each (path, bytes) written to a temporary file beside its path, with the umask's
    mode; (temporary, path) pairs for `move_into_place`. None is left if one fails."""
    staged: list[tuple[Path, Path]] = []
    try:
        for target, data in files:
            fd, tmp = tempfile.mkstemp(prefix=prefix, suffix=".tmp", dir=target.parent)
            staged.append((Path(tmp), target))
            with os.fdopen(fd, "wb") as fh:
                os.fchmod(fh.fileno(), new_file_mode())
                fh.write(data)
    except BaseException:
        discard_staged(staged)
        raise
    return staged


def move_into_place(staged: Sequence[tuple[Path, Path]], *,
                    keep_existing: bool = False) -> list[Path]:
    """Rename each staged temporary file onto its path; the paths. With `keep_existing`, a
    file that appeared at a path since it was checked is kept (FileExistsError), and the
    paths this call already filled are emptied again."""
    placed: list[Path] = []
    try:
        for tmp, target in staged:
            if keep_existing:
                _link_new(tmp, target)
            else:
                os.replace(tmp, target)
            placed.append(target)
    except FileExistsError:
        for target in placed:
            target.unlink(missing_ok=True)
        raise
    return placed


def _link_new(tmp: Path, target: Path) -> None:
    """Give `tmp`'s file the name `target` only if nothing has it (a hard link fails on an
    existing name), where the file system has hard links; else check, then rename."""
    try:
        os.link(tmp, target)
    except FileExistsError:
        raise
    except OSError:
        if os.path.lexists(target):
            raise FileExistsError(target) from None
        os.replace(tmp, target)
        return
    tmp.unlink()


def discard_staged(staged: Sequence[tuple[Path, Path]]) -> None:
    """Remove the temporary files of `stage_files` that are still there."""
    for tmp, _ in staged:
        tmp.unlink(missing_ok=True)


def write_whole(files: Sequence[tuple[Path, bytes]], prefix: str) -> list[Path]:
    """Write every (path, bytes): all are staged first, so an error leaves every path as
    it was and no temporary file behind."""
    staged = stage_files(files, prefix)
    try:
        return move_into_place(staged)
    except BaseException:
        discard_staged(staged)
        raise
