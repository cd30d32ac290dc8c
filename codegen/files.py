"""Writing outputs safely: every file through a temporary file in the same folder renamed
into place, and a generated folder swapped in with a manifest, so that an interrupted write
(Ctrl-C, SIGTERM, a full disk) leaves the earlier good output intact and no temporary
behind, and files of an earlier generation do not linger."""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

MANIFEST = ".pfcrig-manifest"


@contextlib.contextmanager
def atomic_path(path: str | Path) -> Iterator[Path]:
    """A temporary path beside ``path`` to write to; renamed onto ``path`` on success,
    removed on any failure (KeyboardInterrupt included)."""
    path = Path(os.path.realpath(path))  # a symlink's target is written, the link kept
    if path.exists() and not path.is_file():
        raise IsADirectoryError(f"{path}: exists and is not a regular file; not replaced")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # as an ordinary new file gets, not mkstemp's 0600
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def write_folder(files: dict[str, str], out_dir: str | Path) -> list[Path]:
    """Write ``files`` ({name: text}) into ``out_dir``: all of them first into a staging
    folder beside it, then each renamed into place; files an earlier generation listed in
    the folder's manifest and this one does not are removed; the manifest is written last."""
    out = Path(out_dir)
    out.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    try:
        for name in sorted(files):
            (stage / name).write_bytes(files[name].encode("utf-8"))
        (stage / MANIFEST).write_text("".join(f"{n}\n" for n in sorted(files)))
        if not out.exists():
            os.rename(stage, out)
            return [out / n for n in sorted(files)]
        old = set()
        if (out / MANIFEST).is_file():
            old = set((out / MANIFEST).read_text().split())
        for name in sorted(files):
            os.replace(stage / name, out / name)
        for name in sorted(old - set(files)):
            with contextlib.suppress(FileNotFoundError):
                (out / name).unlink()
        os.replace(stage / MANIFEST, out / MANIFEST)
        return [out / n for n in sorted(files)]
    finally:
        shutil.rmtree(stage, ignore_errors=True)
