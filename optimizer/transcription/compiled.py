"""One knot's functions and their derivatives as compiled C, built once and kept in brace's cache folder.

For every knot function ``f`` (:mod:`optimizer.transcription.knot_functions`)
CasADi generates C code for ``f``, its Jacobian ``jac_f``, its reverse
derivative ``adj1_f`` and that one's Jacobian ``jac_adj1_f`` (which holds
the Hessian of ``lam . f``); the system C compiler turns it into one shared
library, loaded with ``casadi.external``. Mapped over the knots like the
SX function it replaces, it gives the NLP solver exact first and second
derivatives evaluated by compiled code, while the NLP keeps the size of one
knot (no expansion into one graph).

An entry's name is the SHA-256 of the function's own serialization (every
number and operation in it: URDF, limits, contact frames, facets, weight,
disturbance shape), CasADi's version, brace's version, the compiler and its
flags; a function that did not change is never compiled again, whatever the
knot count, and anything that changes it makes a new entry. Entries are
written and checked by :mod:`optimizer.cache`.

The compiler is ``$BRACE_CC`` when set, else ``cc``. When it is missing or
fails, :func:`compile_knot_functions` leaves the functions as they are and
returns the reason (the planner then evaluates them uncompiled).
"""
from __future__ import annotations

import contextlib
import hashlib
import os
import shutil
import subprocess

import casadi as ca

from .. import __version__, supervisor
from ..cache import entry_lock, entry_path, new_entry, valid_entry

COMPILER_ENVIRONMENT = "BRACE_CC"
DEFAULT_COMPILER = "cc"
# No optimization: -O2 evaluates the knot functions alone faster (0.64-0.92 of the time) but left the
# robust stage's evaluation time unchanged and compiles about 15 times longer (-O1: 3-4 times);
# benchmarks/RESULTS.md, "Robust-stage iterations, per-iteration cost".
FLAGS = ("-shared", "-fPIC", "-O0")
SECTION = "compiled"


def compiler() -> str:
    """The C compiler command (``$BRACE_CC``, else ``cc``)."""
    return os.environ.get(COMPILER_ENVIRONMENT) or DEFAULT_COMPILER


def compiler_found() -> bool:
    """Whether the C compiler command (:func:`compiler`) is on the search path."""
    return shutil.which(compiler()) is not None


def library_key(function: ca.Function, command: str) -> str:
    """Digest of everything the compiled library of ``function`` depends on (hex)."""
    digest = hashlib.sha256()
    for part in (ca.__version__, __version__, command, " ".join(FLAGS)):
        digest.update(part.encode() + b"\0")
    digest.update(function.serialize().encode())
    return digest.hexdigest()


def library_functions(function: ca.Function) -> list[ca.Function]:
    """``f``, ``jac_f``, ``adj1_f``, ``jac_adj1_f``: what the NLP solver asks of a mapped knot function."""
    reverse = function.reverse(1)
    return [function, function.jacobian(), reverse, reverse.jacobian()]


def knot_function_names(functions) -> list[str]:
    """Attribute paths of every knot function of a :class:`KnotFunctions` (``robust.0``, ``hand.grip``)."""
    names = [n for n in ("dynamics", "stance", "foot_motion", "friction", "rooms", "step", "clearance",
                         "self_clearance")
             if getattr(functions, n, None) is not None]
    names += [f"robust.{i}" for i in range(len(functions.robust))]
    return names + [f"hand.{frame}" for frame in sorted(functions.hand)]


def _get(functions, name):
    head, _, tail = name.partition(".")
    value = getattr(functions, head)
    return value if not tail else value[int(tail) if isinstance(value, list) else tail]


def _set(functions, name, value):
    head, _, tail = name.partition(".")
    if not tail:
        setattr(functions, head, value)
    else:
        getattr(functions, head)[int(tail) if head == "robust" else tail] = value


class CompileFailure(Exception):
    """No library could be made (no compiler, or it failed); the message says why."""


def compiled_functions(originals: dict[str, ca.Function]) -> tuple[dict[str, ca.Function], list[str]]:
    """Each function of ``originals`` from its compiled library: ``(functions by name, names compiled now)``.

    Valid cached libraries are loaded; the others are generated and
    compiled (under their entry locks, so a second process wanting the same
    entries waits and then loads them). Raises :class:`CompileFailure`.
    """
    command = compiler()
    if not compiler_found():
        raise CompileFailure(f"no C compiler '{command}' found (set {COMPILER_ENVIRONMENT} to one)")
    paths = {name: entry_path(SECTION, library_key(f, command) + ".so") for name, f in originals.items()}
    missing = sorted({path for path in paths.values() if not valid_entry(path)})
    built = []
    if missing:
        supervisor.phase("compiling the knot functions (once per robot and shape)")
        by_path = {path: originals[name] for name, path in paths.items()}
        with contextlib.ExitStack() as locks:
            for path in missing:  # sorted: two processes never wait on each other in a cycle
                locks.enter_context(entry_lock(path))
            todo = [path for path in missing if not valid_entry(path)]  # another process may have built some
            failure = _build_libraries([(path, by_path[path]) for path in todo], command)
            if failure is not None:
                raise CompileFailure(failure)
            built = [name for name, path in paths.items() if path in todo]
    return {name: _load(originals[name], paths[name]) for name in originals}, built


def compile_knot_functions(functions) -> str | None:
    """Replace every knot function of a :class:`KnotFunctions` by its compiled, cached library.

    Returns None when done, or why nothing was replaced (no compiler, a
    compiler error); the functions are then left as they were.
    """
    originals = {name: _get(functions, name) for name in knot_function_names(functions)}
    try:
        loaded, _ = compiled_functions(originals)
    except CompileFailure as failure:
        return str(failure)
    for name, value in loaded.items():
        _set(functions, name, value)
    return None


def _load(original: ca.Function, path) -> ca.Function:
    """The library's function, checked against ``original``'s inputs and outputs."""
    loaded = ca.external(original.name(), str(path))
    same = (loaded.n_in() == original.n_in() and loaded.n_out() == original.n_out()
            and all(loaded.sparsity_in(i) == original.sparsity_in(i) for i in range(original.n_in()))
            and all(loaded.sparsity_out(i) == original.sparsity_out(i) for i in range(original.n_out())))
    if not same:
        raise RuntimeError(f"compiled library {path} does not match the function {original.name()}")
    return loaded


def _build_libraries(jobs, command) -> str | None:
    """Generate and compile each (path, function), up to one compiler per core at once; None or the failure."""
    folder = supervisor.scratch_dir("compile")
    running = []
    try:
        with contextlib.ExitStack() as entries:
            for i, (path, function) in enumerate(jobs):
                source = f"knot{i}.c"
                generator = ca.CodeGenerator(source)
                for part in library_functions(function):
                    generator.add(part)
                generator.generate(str(folder) + os.sep)
                target = entries.enter_context(new_entry(path))
                running.append(_start(command, folder / source, target))
                if len(running) >= (os.cpu_count() or 1):
                    failure = _wait(running.pop(0))
                    if failure is not None:
                        raise _Failed(failure)
            while running:
                failure = _wait(running.pop(0))
                if failure is not None:
                    raise _Failed(failure)
    except _Failed as failed:
        return str(failed)
    finally:
        for process in running:  # left over after a failure
            if process.poll() is None:
                process.kill()
            process.wait()
        supervisor.remove_scratch(folder)
    return None


class _Failed(Exception):
    """A compiler run failed (its message is the reason)."""


def _start(command, source, target) -> subprocess.Popen:
    return subprocess.Popen([command, *FLAGS, str(source), "-o", str(target), "-lm"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)


def _wait(process: subprocess.Popen) -> str | None:
    _, errors = process.communicate()
    if process.returncode == 0:
        return None
    first = next((line for line in errors.splitlines() if line.strip()), "no message")
    return f"the C compiler '{process.args[0]}' failed ({first.strip()[:160]})"
