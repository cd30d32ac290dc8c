"""Compile generated C: strict warnings-as-errors objects, linked into a cffi
(API mode) extension cached by a hash of the sources and flags.

The firmware sources are compiled on their own with ``STRICT_FLAGS`` (the
cffi wrapper, which is not ours, is compiled with the compiler's defaults and
linked against those objects), so a warning in generated code fails the build
with the C diagnostic and the offending generated line.
"""

from __future__ import annotations

import hashlib
import importlib.machinery
import importlib.util
import os
import re
import shutil
import subprocess
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

import cffi
import jinja2

from design.project import Project

from .render import render, render_host

STRICT_FLAGS = [
    "-std=c99",
    "-Wall",
    "-Wextra",
    "-Wpedantic",
    "-Wconversion",
    "-Wdouble-promotion",
    "-Wshadow",
    "-Werror",
]
HOST_FLAGS = ["-O2", "-fPIC", "-ffp-contract=off", "-fno-strict-aliasing"]
INTERNAL_HEADERS = (
    "_math.h",
    "_config.h",
)  # static inline helpers and macros: not part of the cffi interface


class BuildError(RuntimeError):
    """The C compiler rejected generated code; the message carries its diagnostic."""


def cache_root() -> Path:
    """The per-user build cache (``$PFCRIG_CACHE`` or ``~/.cache/pfcrig``), created 0700;
    refused when someone else owns it or others may write to it (what is in it is loaded and
    run)."""
    root = Path(os.environ.get("PFCRIG_CACHE", Path.home() / ".cache" / "pfcrig"))
    try:
        root.mkdir(parents=True, exist_ok=True, mode=0o700)
        st = root.stat()
    except OSError as exc:
        raise BuildError(f"build cache {root}: cannot use it ({exc.strerror})") from None
    if st.st_uid != os.getuid():
        raise BuildError(f"build cache {root}: owned by another user; refusing to load from it")
    if st.st_mode & 0o022:
        raise BuildError(
            f"build cache {root}: writable by group or others "
            f"(mode {st.st_mode & 0o777:o}); chmod 700 it"
        )
    return root


def file_digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def verified(path: Path | None) -> bool:
    """True when ``path`` exists and still has the hash recorded beside it at build time."""
    if path is None or not path.is_file():
        return False
    try:
        return _sidecar(path).read_text().split() == [file_digest(path)]
    except OSError:
        return False


def _sidecar(path: Path) -> Path:
    """Where an artefact's build-time hash is kept: ``NAME.sha256`` beside it."""
    return path.with_name(path.name + ".sha256")


def record_digest(path: Path) -> None:
    _sidecar(path).write_text(file_digest(path) + "\n")


def _diagnostic(stderr: str, src_dir: Path) -> str:
    lines = [stderr.strip()]
    for m in re.finditer(r"^([^\s:]+\.[ch]):(\d+):(\d+): (?:error|warning)", stderr, re.M):
        path = Path(m.group(1))
        path = path if path.is_absolute() else src_dir / path.name
        try:
            text = path.read_text().splitlines()[int(m.group(2)) - 1]
        except (OSError, IndexError):
            continue
        lines.append(f"  generated line {path.name}:{m.group(2)}: {text.strip()}")
    return "\n".join(lines)


def compile_objects(
    src_dir: Path, out_dir: Path, cc: str = "gcc", flags: list[str] | None = None
) -> list[Path]:
    """Compile every ``*.c`` in ``src_dir`` with the strict flags; returns the object files."""
    flags = STRICT_FLAGS + (HOST_FLAGS if flags is None else flags)
    out_dir.mkdir(parents=True, exist_ok=True)
    objs = []
    for c_file in sorted(src_dir.glob("*.c")):
        obj = out_dir / (c_file.stem + ".o")
        r = subprocess.run(
            [cc, *flags, "-I", str(src_dir), "-c", str(c_file), "-o", str(obj)],
            capture_output=True,
            text=True,
        )
        if r.returncode != 0 or r.stderr.strip():
            raise BuildError(f"{cc} failed on {c_file.name}:\n{_diagnostic(r.stderr, src_dir)}")
        objs.append(obj)
    return objs


def cdef_from_headers(headers: list[str], sizes: dict[str, int] | None = None) -> str:
    """Declarations for cffi: the public headers without comments, preprocessor lines and
    C++ guards; array sizes given by integer macros (``[PFC_BUS_BLOCKS]``) are replaced
    by their values from ``sizes``."""
    out = []
    sizes = sizes or {}
    for text in headers:
        text = re.sub(r"/\*.*?\*/", "", text, flags=re.S)
        text = re.sub(r"//[^\n]*", "", text)
        text = re.sub(r'^extern "C" \{$|^\}$', "", text, flags=re.M)
        text = re.sub(
            r"\[([A-Z][A-Z0-9_]*)\]", lambda m: f"[{sizes.get(m.group(1), m.group(1))}]", text
        )
        out.extend(ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#"))
    return "\n".join(out)


def integer_macros(files: dict[str, str], prefix: str) -> dict[str, int]:
    """Values of every ``#define PREFIX_NAME 12u`` macro in ``files``."""
    found: dict[str, int] = {}
    for text in files.values():
        for name, value in re.findall(
            rf"^#define ({prefix.upper()}_[A-Z0-9_]+) \(?(\d+)u\)?", text, re.M
        ):
            found[name] = int(value)
    return found


def _integer_macro_cdef(macros: dict[str, int]) -> str:
    """The macros as cffi integer constants (``#define NAME ...``)."""
    return "\n".join(f"#define {n} ..." for n in sorted(macros))


@dataclass
class Built:
    """An imported extension: ``ffi`` and ``lib`` as cffi gives them, plus where it lives."""

    ffi: object
    lib: object
    path: Path
    key: str


def _digest(files: dict[str, str], extra: str) -> str:
    h = hashlib.sha256()
    for name in sorted(files):
        h.update(name.encode() + b"\0" + files[name].encode() + b"\0")
    h.update(extra.encode())
    h.update(f"{cffi.__version__}|{sys.version}|{' '.join(STRICT_FLAGS + HOST_FLAGS)}".encode())
    return h.hexdigest()[:20]


def _import(path: Path, modname: str) -> Built:
    loader = importlib.machinery.ExtensionFileLoader(modname, str(path))
    spec = importlib.util.spec_from_file_location(modname, path, loader=loader)
    mod = importlib.util.module_from_spec(spec)
    loader.exec_module(mod)
    return Built(mod.ffi, mod.lib, path, modname)


_LOADED: dict[str, Built] = {}


def build(
    files: dict[str, str], prefix: str, extra_c: dict[str, str] | None = None, cc: str = "gcc"
) -> Built:
    """Build (or fetch from the cache) an extension exposing every public function.

    ``files`` are the generated sources ({name: text}); ``extra_c`` host-only sources
    (not part of the MCU build) compiled beside them with the same strict flags.
    """
    extra_c = extra_c or {}
    allf = {**files, **extra_c}
    key = _digest(allf, cc)
    modname = f"_pfcrig_{prefix}_{key}"
    if modname in _LOADED:
        return _LOADED[modname]
    final = cache_root() / "build" / key
    so = next(iter(final.glob(f"{modname}*.so")), None) if final.is_dir() else None
    for attempt in range(2):
        if not verified(so):  # missing, changed or never recorded: build it (again)
            shutil.rmtree(final, ignore_errors=True)
            so = _compile_extension(allf, prefix, modname, cc, final)
        try:
            built = _import(so, modname)
            break
        except ImportError as exc:
            if attempt:
                raise BuildError(f"the built extension {so} does not load: {exc}") from None
            so = None
    _LOADED[modname] = built
    return built


def _compile_extension(
    allf: dict[str, str], prefix: str, modname: str, cc: str, final: Path
) -> Path:
    """Compile, link and move into ``final`` the cffi extension; its hash recorded beside it."""
    tmp = Path(tempfile.mkdtemp(prefix="build-", dir=cache_root()))
    try:
        src = tmp / "src"
        src.mkdir()
        for name, text in allf.items():
            (src / name).write_text(text)
        objs = compile_objects(src, tmp / "obj", cc=cc)
        order = _header_order(allf, prefix)
        headers = [allf[n] for n in order]
        ffi = cffi.FFI()
        macros = integer_macros(allf, prefix)
        ffi.cdef(cdef_from_headers(headers, macros) + "\n" + _integer_macro_cdef(macros))
        includes = "\n".join(f'#include "{n}"' for n in order) + f'\n#include "{prefix}_config.h"\n'
        ffi.set_source(
            modname,
            includes,
            include_dirs=[str(src)],
            extra_objects=[str(o) for o in objs],
            extra_compile_args=["-O2", "-w"],
        )
        out = Path(ffi.compile(tmpdir=str(tmp / "ext"), verbose=False))
        stage = tmp / "final"
        stage.mkdir()
        shutil.move(str(out), stage / out.name)
        record_digest(stage / out.name)
        for name in allf:
            shutil.copy(src / name, stage / name)
        final.parent.mkdir(parents=True, exist_ok=True)
        try:
            os.rename(stage, final)
        except OSError:
            if not final.is_dir():  # lost a race to another process: use its result
                raise
        return next(final.glob(f"{modname}*.so"))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _header_order(files: dict[str, str], prefix: str) -> list[str]:
    """Public headers in dependency order (each after the headers it includes)."""
    names = [n for n in files if n.endswith(".h") and not n.endswith(INTERNAL_HEADERS)]
    deps = {
        n: [d for d in re.findall(r'#include "([^"]+)"', files[n]) if d in names] for n in names
    }
    order: list[str] = []

    def visit(n: str) -> None:
        if n in order:
            return
        for d in deps[n]:
            visit(d)
        order.append(n)

    for n in sorted(names):
        visit(n)
    return order


def build_project(prj: Project, loader: jinja2.BaseLoader | None = None) -> Built:
    """The generated controller of ``prj`` plus the host-only batch sources, compiled
    (cached); ``loader`` renders from other templates (tests: broken controllers)."""
    return build(render(prj, loader), prj.config.control.prefix, extra_c=render_host(prj))
