"""Integrands written as the user's own Python code (``[integrand] python = "module:function"``).

Binding a problem whose integrand is Python imports the user's code, so it
happens only when the user allowed it (``--allow-python``,
``allow_python=True``) and never while a problem file is merely read
(:func:`cubage.problem.problem_file.read_problem_spec`).

The bound integrand is a :class:`PythonIntegrand`: it calls the function and
pickles as its import path plus a digest of the code that was imported, so a
worker process re-imports it (no cloudpickle of user objects) and refuses to
evaluate if the code changed on disk in between.  The same digest enters the
problem's fingerprint, so editing the module between a run and its resume is
noticed (issue 10 item 15e).

Which files count as "the code": the module's own source file; when the
module belongs to a package, every module of that package it imports
(directly or through other modules of the package); for a lone module, the
lone modules beside it that it imports (same folder); for ``file.py``
targets, that file and the modules beside it that it imports.  Code outside
(installed libraries) is not included.
"""

from __future__ import annotations

import hashlib
import importlib
import importlib.util
import sys
import types
from collections.abc import Callable
from pathlib import Path

import numpy as np

__all__ = ["PythonTargetError", "PythonIntegrand", "bind_python", "import_function", "code_digest"]

#: Most source files one digest reads (a bound on the work for a huge package).
MAX_DIGEST_FILES = 500


class PythonTargetError(Exception):
    """A Python target that cannot be imported or used; ``str()`` is one line."""


def _one_line(exc: BaseException) -> str:
    msg = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {msg}" if msg else type(exc).__name__


def _split(target: str) -> tuple[str, str]:
    modname, _, funcname = target.rpartition(":")
    return modname.strip(), funcname.strip()


def _file_module_name(file: Path) -> str:
    digest = hashlib.sha256(str(file.resolve()).encode()).hexdigest()[:16]
    return f"cubage_user_{file.stem}_{digest}"


def import_function(target: str, base_dir: str) -> tuple[Callable, types.ModuleType]:
    """Import ``module:function`` or ``file.py:function`` (relative to ``base_dir``).

    Returns
    -------
    (function, module)

    Raises
    ------
    PythonTargetError
        With a one-line reason (whatever the user's code raised while importing,
        ``SystemExit`` included).
    """
    modname, funcname = _split(target)
    try:
        if modname.endswith(".py"):
            file = Path(modname)
            if not file.is_absolute():
                file = Path(base_dir) / file
            if not file.is_file():
                raise PythonTargetError(f"cannot find the file {file}")
            name = _file_module_name(file)
            mod = sys.modules.get(name)
            if mod is not None and _edited_since_loaded(mod):
                mod = None                      # edited since this process loaded it: load it again
            if mod is None:
                spec = importlib.util.spec_from_file_location(name, file)
                if spec is None or spec.loader is None:
                    raise PythonTargetError(f"cannot load {file} as Python")
                mod = importlib.util.module_from_spec(spec)
                sys.modules[name] = mod
                added = str(file.resolve().parent)
                sys.path.insert(0, added)    # so that the file can import the modules beside it
                try:
                    # run exactly the bytes that are hashed (no cached bytecode that could be stale)
                    source = file.read_bytes()
                    mod.__dict__["_cubage_loaded_sha256"] = hashlib.sha256(source).hexdigest()
                    exec(compile(source, str(file), "exec"), mod.__dict__)  # noqa: S102 - allowed user code
                except BaseException:
                    sys.modules.pop(name, None)
                    raise
                finally:
                    try:
                        sys.path.remove(added)
                    except ValueError:
                        pass
        else:
            added = base_dir not in sys.path
            if added:
                sys.path.insert(0, base_dir)
            try:
                mod = importlib.import_module(modname)
                if _edited_since_loaded(mod):
                    mod = importlib.reload(mod)
                    _remember_source(mod, _source_file(mod))
            finally:
                if added:
                    try:
                        sys.path.remove(base_dir)
                    except ValueError:
                        pass
    except PythonTargetError:
        raise
    except (Exception, SystemExit) as exc:  # user code may raise anything while importing
        raise PythonTargetError(f"cannot import {modname}: {_one_line(exc)}") from None
    if not funcname.isidentifier() or not hasattr(mod, funcname):
        raise PythonTargetError(f"{modname} has no function '{funcname}'")
    fn = getattr(mod, funcname)
    if not callable(fn):
        raise PythonTargetError(f"{modname}:{funcname} is not callable")
    return fn, mod


def _read(file: Path | None) -> bytes | None:
    if file is None:
        return None
    try:
        return file.read_bytes()
    except OSError:
        return None


def _remember_source(mod: types.ModuleType, file: Path | None) -> None:
    """Note the hash of the source this process loads for ``mod`` (to notice later edits)."""
    data = _read(file)
    if data is not None:
        mod.__dict__["_cubage_loaded_sha256"] = hashlib.sha256(data).hexdigest()


def _edited_since_loaded(mod: types.ModuleType) -> bool:
    """True when the module's source file changed on disk since this process loaded it.

    A long-lived process (the text UI) then loads the target module again, so
    that the code it runs is the code the fingerprint describes.  Modules that
    the target imports are not reloaded.
    """
    data = _read(_source_file(mod))
    if data is None:
        return False
    now = hashlib.sha256(data).hexdigest()
    was = mod.__dict__.setdefault("_cubage_loaded_sha256", now)
    return was != now


def _source_file(mod) -> Path | None:
    f = getattr(mod, "__file__", None)
    if not f or not str(f).endswith(".py"):
        return None
    return Path(f)


def _related(root_mod: types.ModuleType, other: types.ModuleType) -> bool:
    """Whether ``other`` is part of the user's code as seen from ``root_mod``."""
    if other is root_mod:
        return True
    top = root_mod.__name__.partition(".")[0]
    if root_mod.__package__ and other.__name__.partition(".")[0] == top:
        return True   # the same package
    rf, of = _source_file(root_mod), _source_file(other)
    if rf is None or of is None or other.__package__:
        return False
    return of.resolve().parent == rf.resolve().parent   # a lone module beside a lone module


def _imported_modules(mod: types.ModuleType) -> list[types.ModuleType]:
    """``mod`` and the user modules it imports, transitively, in a stable order (by name)."""
    seen = {mod.__name__: mod}
    todo = [mod]
    while todo and len(seen) < MAX_DIGEST_FILES:
        m = todo.pop()
        for value in list(vars(m).values()):
            if isinstance(value, types.ModuleType):
                other = value
            else:
                try:
                    owner = getattr(value, "__module__", None)
                except Exception:  # noqa: BLE001 - any object of the user's may sit in a module
                    owner = None
                other = sys.modules.get(owner) if isinstance(owner, str) else None
            if isinstance(other, types.ModuleType) and other.__name__ not in seen and _related(mod, other):
                seen[other.__name__] = other
                todo.append(other)
    return [seen[k] for k in sorted(seen)]


def code_digest(module: types.ModuleType) -> str:
    """sha256 over the source files of ``module`` and of the user modules it imports.

    Each file enters as its module name and its bytes, read from disk now, so
    an edit after the import changes the digest.
    """
    h = hashlib.sha256()
    for m in _imported_modules(module):
        f = _source_file(m)
        name = m.__name__ if not m.__name__.startswith("cubage_user_") else (f.name if f else m.__name__)
        h.update(name.encode("utf-8") + b"\0")
        try:
            h.update(f.read_bytes() if f is not None else b"<no source file>")
        except OSError:
            h.update(b"<unreadable>")
        h.update(b"\0")
    return h.hexdigest()


class PythonIntegrand:
    """The user's function, bound from ``python = "module:function"``.

    Calling it calls the function.  It pickles as ``(target, base_dir,
    code_sha256)``: unpickling re-imports the code (once per process) and
    raises :class:`PythonTargetError` if its digest is no longer
    ``code_sha256``, so a worker never evaluates code other than what the
    run started with.

    Attributes
    ----------
    target : str
        ``"module:function"`` or ``"file.py:function"``.
    base_dir : str
        Folder against which the target was resolved (the problem file's).
    code_sha256 : str
        :func:`code_digest` of the imported code.
    function : callable
        The user's function.
    """

    def __init__(self, target: str, base_dir: str, function: Callable, code_sha256: str):
        self.target = target
        self.base_dir = base_dir
        self.function = function
        self.code_sha256 = code_sha256

    def __call__(self, X: np.ndarray):
        return self.function(X)

    def __reduce__(self):
        return (bind_python, (self.target, self.base_dir, self.code_sha256))

    def __repr__(self) -> str:
        return f"PythonIntegrand({self.target!r}, code {self.code_sha256[:12]})"


_BOUND: dict[tuple[str, str, str], PythonIntegrand] = {}


def bind_python(target: str, base_dir: str, code_sha256: str | None = None) -> PythonIntegrand:
    """Import the target and wrap it; with ``code_sha256``, refuse code that changed since.

    Raises
    ------
    PythonTargetError
    """
    if code_sha256 is not None:
        hit = _BOUND.get((target, base_dir, code_sha256))
        if hit is not None:
            return hit
    fn, mod = import_function(target, base_dir)
    digest = code_digest(mod)
    if code_sha256 is not None and digest != code_sha256:
        raise PythonTargetError(f"the code of {target} changed on disk since the run started "
                                f"(digest {digest[:12]}, expected {code_sha256[:12]})")
    bound = PythonIntegrand(target, base_dir, fn, digest)
    _BOUND[(target, base_dir, digest)] = bound
    return bound
