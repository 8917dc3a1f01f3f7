"""Stage 2: one trial in the engine: world, contacts, hand, phases, routines, metrics."""


def _import_pybullet_quietly():
    """Import pybullet with its build-time banner silenced: the engine prints it from C (to file
    descriptor 2) on import, so every command and every worker process would show it. Every module
    of this stage is imported after this package, so their own `import pybullet` finds it loaded."""
    import os
    import sys
    if "pybullet" in sys.modules:
        return
    for stream in (sys.stdout, sys.stderr):
        if stream is not None:
            stream.flush()
    try:
        saved = [(fd, os.dup(fd)) for fd in (1, 2)]
    except OSError:  # a standard stream is closed: nothing to keep clean
        import pybullet  # noqa: F401
        return
    null = os.open(os.devnull, os.O_WRONLY)
    try:
        for fd, _ in saved:
            os.dup2(null, fd)
        import pybullet  # noqa: F401
    finally:
        _flush_c_stdio()  # anything the engine left in C's buffers goes to /dev/null too
        for fd, copy in saved:
            os.dup2(copy, fd)
            os.close(copy)
        os.close(null)


def _flush_c_stdio():
    try:
        import ctypes
        ctypes.CDLL(None).fflush(None)
    except (OSError, AttributeError):  # no C library to reach (not on Linux or macOS)
        pass


_import_pybullet_quietly()
