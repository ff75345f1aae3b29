"""Commands that stop when asked, at any moment, and leave no temporary files.

A command's work runs in a child process; the parent only waits. Python
cannot act on a signal while its main thread is inside a long native call
(building a CasADi solver can take a minute), so the parent does the
stopping: on SIGINT, SIGTERM or SIGHUP it kills the child's whole process
group at once, removes every temporary file the work made, prints one line
saying what was stopped and returns 128 + the signal number (130, 143, 129).
A second signal while it does so ends the parent at once.

The child's temporary files all live in one folder the parent created (the
child's ``TMPDIR`` and :data:`tempfile.tempdir`), so removing that folder
removes them whatever the child was doing. Temporary files that must live
elsewhere (an output written atomically beside its final path) are declared
with :func:`will_create` before they are made. Outputs are written atomically
(``optimizer.files.atomic_output``), so a stopped command never leaves a
half-written file; logs the user asked for stay where they asked.

API (the command line uses :func:`run`; library code calls the others, which
also work, and do the right thing, without a supervisor)::

    code = supervisor.run(work, command="solve")  # work() -> exit code, in a supervised child
    supervisor.phase("building the robust solver")  # what the work does now (named when stopped)
    folder = supervisor.scratch_dir("ipopt")        # a temporary folder brace removes itself
    supervisor.remove_scratch(folder)               # ... now, when its owner is done with it
    supervisor.will_create(folder, prefix)          # temporary files outside the scratch area
    supervisor.on_phase(print_phase)                # also hand each phase to a local listener

Without a supervisor (the Python API, tests calling ``cli.main(argv)``),
:func:`phase` only calls the local listener, and scratch folders live in
one per-process folder removed when the process exits normally.
"""
from __future__ import annotations

import atexit
import contextlib
import os
import shutil
import signal
import sys
import tempfile
import threading
import time
from pathlib import Path

SCRATCH_PREFIX = "brace-"  # every temporary file or folder brace makes starts with this
STOP_SIGNALS = {signal.SIGINT: "SIGINT", signal.SIGTERM: "SIGTERM", signal.SIGHUP: "SIGHUP"}
INTERNAL_ERROR = 70

_pipe: int | None = None          # write end to the supervising parent (in a supervised child)
_listener = None                  # local phase listener (the command line's printer)
_process_scratch: Path | None = None
_process_scratch_pid: int | None = None


# -- what the work calls -------------------------------------------------------

def phase(text: str) -> None:
    """Say what the work is doing now, e.g. ``"building the robust solver"``.

    The supervisor names the last phase when it stops the work; a local
    listener set with :func:`on_phase` also receives it. Cheap; no effect
    when nobody listens.
    """
    if _pipe is not None:
        _send("P", text)
    if _listener is not None:
        _listener(text)


def on_phase(listener) -> None:
    """Call ``listener(text)`` at every :func:`phase` in this process (None to stop)."""
    global _listener
    _listener = listener


def scratch_dir(purpose: str) -> Path:
    """A new empty folder for temporary files, removed by brace whatever happens.

    Inside a supervised run it lies in the run's temporary folder (removed by
    the supervisor on success, failure and interrupt); otherwise in one
    per-process folder removed when the process exits. Owners that are done
    with it earlier call :func:`remove_scratch`.
    """
    return Path(tempfile.mkdtemp(prefix=f"{purpose}-", dir=_scratch_root()))


def remove_scratch(folder) -> None:
    """Remove a folder made by :func:`scratch_dir` and everything in it."""
    shutil.rmtree(folder, ignore_errors=True)


def will_create(folder, prefix: str) -> None:
    """Declare that temporary files or folders named ``prefix*`` are about to be made in ``folder``.

    For temporary files that cannot live in the scratch area (an output
    written beside its final path so that the final rename is atomic). The
    supervisor removes them if it stops the work; the work removes them
    itself otherwise. ``prefix`` must be specific to this process (carry its
    pid).
    """
    if _pipe is not None:
        _send("T", f"{os.path.abspath(folder)}\0{prefix}")


def current_scratch_root() -> Path | None:
    """This process's folder of scratch folders, if it made one and it still exists."""
    if _process_scratch is not None and _process_scratch_pid == os.getpid() and _process_scratch.is_dir():
        return _process_scratch
    return None


def supervised() -> bool:
    """True inside a child run by :func:`run`."""
    return _pipe is not None


def _send(kind: str, text: str) -> None:
    line = (kind + text.replace("\n", " ") + "\n").encode("utf-8", "replace")
    with contextlib.suppress(OSError):
        os.write(_pipe, line)


def _scratch_root() -> Path:
    """This process's folder of scratch folders (created on first use)."""
    global _process_scratch, _process_scratch_pid
    if _process_scratch is None or _process_scratch_pid != os.getpid() or not _process_scratch.is_dir():
        _process_scratch = Path(tempfile.mkdtemp(prefix=f"{SCRATCH_PREFIX}{os.getpid()}-"))
        _process_scratch_pid = os.getpid()
        atexit.register(_remove_process_scratch, _process_scratch, os.getpid())
    return _process_scratch


def _remove_process_scratch(folder: Path, owner: int) -> None:
    if os.getpid() == owner:
        shutil.rmtree(folder, ignore_errors=True)


# -- the supervising parent ------------------------------------------------------

class _Run:
    """State of one supervised run, as the parent sees it."""

    def __init__(self, command: str, grace: float = 0.0):
        self.command = command
        self.grace = grace
        self.root = Path(tempfile.mkdtemp(prefix=f"{SCRATCH_PREFIX}run-"))
        self.pid: int | None = None
        self.phase = "starting"
        self.phase_started = time.monotonic()
        self.declared: list[tuple[str, str]] = []
        self.stopping = False
        self.grace_seconds = grace
        self.reader: threading.Thread | None = None

    def read_messages(self, fd: int) -> None:
        """Reader thread: phases and declared temporary files from the child, until EOF."""
        buffer = b""
        while True:
            try:
                chunk = os.read(fd, 65536)
            except OSError:
                break
            if not chunk:
                break
            buffer += chunk
            *lines, buffer = buffer.split(b"\n")
            for raw in lines:
                text = raw.decode("utf-8", "replace")
                if text[:1] == "P":
                    self.phase, self.phase_started = text[1:], time.monotonic()
                elif text[:1] == "T" and "\0" in text:
                    folder, prefix = text[1:].split("\0", 1)
                    self.declared.append((folder, prefix))
        with contextlib.suppress(OSError):
            os.close(fd)

    def clean(self) -> None:
        """Remove the run's temporary folder and every declared temporary file."""
        for folder, prefix in list(self.declared):
            with contextlib.suppress(OSError):
                for entry in os.scandir(folder):
                    if entry.name.startswith(prefix):
                        if entry.is_dir(follow_symlinks=False):
                            shutil.rmtree(entry.path, ignore_errors=True)
                        else:
                            with contextlib.suppress(OSError):
                                os.unlink(entry.path)
        shutil.rmtree(self.root, ignore_errors=True)

    def stop(self, signum, frame) -> None:
        """Signal handler: kill the work, clean up, say what was stopped, raise :class:`_Stopped`."""
        code = 128 + int(signum)
        if self.stopping:  # a second signal: end at once
            os._exit(code)
        if self.grace > 0 and self.pid is not None and signum != signal.SIGALRM:
            # The work stops itself (it keeps what it finished): pass the signal on, and kill it
            # anyway if it has not ended within the grace time or a second signal comes.
            self.grace, self.signum = 0.0, signum
            with contextlib.suppress(OSError):
                os.killpg(self.pid, signum)
            signal.signal(signal.SIGALRM, self.stop)
            signal.setitimer(signal.ITIMER_REAL, self.grace_seconds)
            return
        if signum == signal.SIGALRM:
            signum = code = getattr(self, "signum", signal.SIGINT)
            code = 128 + int(signum)
        self.stopping = True
        if self.pid is not None:
            with contextlib.suppress(OSError):
                os.killpg(self.pid, signal.SIGKILL)
            with contextlib.suppress(OSError):
                os.kill(self.pid, signal.SIGKILL)
            with contextlib.suppress(ChildProcessError, OSError):
                os.waitpid(self.pid, 0)
        if self.reader is not None and self.reader.is_alive():  # the work is dead: its last messages are in the pipe
            self.reader.join(timeout=0.5)  # (not alive: the signal came before the reader had started)
        self.clean()
        name = STOP_SIGNALS.get(signum, f"signal {int(signum)}")
        spent = time.monotonic() - self.phase_started
        print(f"brace {self.command}: interrupted ({name}) while {self.phase} ({spent:.1f} s into it); "
              "stopped, nothing half-written left, temporary files removed", file=sys.stderr, flush=True)
        raise _Stopped(code)


class _Stopped(Exception):
    def __init__(self, code: int):
        super().__init__(code)
        self.code = code


def run(work, *, command: str, grace: float = 0.0) -> int:
    """Run ``work()`` (returns an exit code) in a supervised child process; return its exit code.

    Parameters
    ----------
    work : callable() -> int
        The command's whole job, with its own error handling (it runs after a
        ``fork``, so it sees everything the caller set up). Its output goes
        straight to the inherited standard output and error.
    command : str
        The command's name, for the one line printed when it is stopped.
    grace : float
        0 (default): a stop signal kills the work at once. > 0: the signal
        is passed on to the work, which stops itself (e.g. a batch command
        keeping its finished results); it is killed if it has not ended
        after ``grace`` seconds or at a second signal.

    Returns
    -------
    int
        The child's exit code; 128 + signal number when stopped by SIGINT,
        SIGTERM or SIGHUP (130, 143, 129); 128 + n when the child was killed
        by signal n from elsewhere (137: often the system out of memory),
        with one line saying so.
    """
    if not hasattr(os, "fork"):  # no fork (Windows): run in-process, stoppable between Python steps only
        return int(work() or 0)
    state = _Run(command, grace)
    previous = {s: signal.getsignal(s) for s in STOP_SIGNALS}
    for s in STOP_SIGNALS:
        signal.signal(s, state.stop)
    sys.stdout.flush(), sys.stderr.flush()
    read_end, write_end = os.pipe()
    try:
        pid = os.fork()
        if pid == 0:  # the child: never returns
            os.close(read_end)
            _child(work, write_end, state.root, previous)
        state.pid = pid
        with contextlib.suppress(OSError):
            os.setpgid(pid, pid)  # the child does it too; whoever comes first wins the race
        os.close(write_end)
        state.reader = threading.Thread(target=state.read_messages, args=(read_end,), daemon=True)
        state.reader.start()
        _, status = os.waitpid(pid, 0)
        state.pid = None
        state.reader.join(timeout=1.0)
        code = os.waitstatus_to_exitcode(status)
        if code < 0:
            code = _report_killed(state, -code)
        return code
    except _Stopped as stopped:
        return stopped.code
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        if not state.stopping:
            state.clean()
        for s, handler in previous.items():
            signal.signal(s, handler)


def _report_killed(state: _Run, signum: int) -> int:
    name = signal.Signals(signum).name if signum in signal.Signals.__members__.values() else str(signum)
    hint = " (often the system running out of memory; see --memory-limit)" if signum == signal.SIGKILL else ""
    print(f"brace {state.command}: the work was killed by {name}{hint} while {state.phase}; "
          "nothing half-written left, temporary files removed", file=sys.stderr, flush=True)
    return 128 + signum


def _child(work, write_end: int, root: Path, handlers) -> None:
    """Run the work in the forked child and exit with its code (never returns)."""
    global _pipe, _process_scratch
    code = INTERNAL_ERROR
    try:
        for s, handler in handlers.items():
            signal.signal(s, handler)
        with contextlib.suppress(OSError):
            os.setpgid(0, 0)  # own group: the terminal's Ctrl-C goes to the parent only
        _die_with_parent()
        _pipe, _process_scratch = write_end, None
        os.environ["TMPDIR"] = str(root)
        tempfile.tempdir = str(root)
        code = int(work() or 0)
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else 1
    except BaseException as exc:  # a bug in brace; the work normally handles its own errors
        with contextlib.suppress(Exception):
            print(f"internal error: {type(exc).__name__}: {exc}", file=sys.stderr)
    finally:
        with contextlib.suppress(Exception):
            sys.stdout.flush()
            sys.stderr.flush()
        os._exit(code)


def _die_with_parent() -> None:
    """Linux: have the kernel kill this process if the supervising parent dies."""
    with contextlib.suppress(Exception):
        import ctypes

        PR_SET_PDEATHSIG = 1
        ctypes.CDLL(None, use_errno=True).prctl(PR_SET_PDEATHSIG, int(signal.SIGKILL))
