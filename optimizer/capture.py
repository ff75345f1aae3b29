"""Collect what C and C++ libraries (Pinocchio, CasADi, Ipopt) print, so it never reaches the user unasked."""
from __future__ import annotations

import contextlib
import ctypes
import io
import os
import sys
import tempfile


@contextlib.contextmanager
def captured_output(fd: int = 2):
    """Collect what C++ code writes to file descriptor ``fd`` (1 or 2) into ``lines`` (a list).

    The matching Python stream is redirected too: CasADi hands its C++
    output to Python's ``sys.stdout``, which may not be file descriptor 1.
    """
    lines: list[str] = []
    (sys.stdout if fd == 1 else sys.stderr).flush()
    redirect = contextlib.redirect_stdout if fd == 1 else contextlib.redirect_stderr
    saved = os.dup(fd)
    with tempfile.TemporaryFile(mode="w+b") as sink, io.StringIO() as python_side:
        os.dup2(sink.fileno(), fd)
        try:
            with redirect(python_side):
                yield lines
        finally:
            _flush_c_streams()
            os.dup2(saved, fd)
            os.close(saved)
            sink.seek(0)
            lines.extend(sink.read().decode("utf-8", "replace").splitlines())
            lines.extend(python_side.getvalue().splitlines())


def _flush_c_streams() -> None:
    """Flush the C library's stdio buffers, so text C++ code printed lands in the capture."""
    with contextlib.suppress(OSError, AttributeError, TypeError):
        ctypes.CDLL(None).fflush(None)


def captured_stderr():
    """Collect what C++ code writes to standard error into ``lines`` (a list)."""
    return captured_output(2)
