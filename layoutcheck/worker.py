"""A page worker: a child process that plans files and checks pages one at a time, under limits.

The batch (local pool or a Dask task) starts it as ``python -m layoutcheck.worker IN OUT`` with
two pipe descriptors, and talks to it with :mod:`multiprocessing.connection` messages:

- first ``("init", templates, settings, limits, memory_mb)``; the worker caps its own memory,
  imports the readers and answers ``("ready",)``;
- then ``(kind, i, path, page)`` tasks (``kind`` "plan" or "page"), each answered with
  ``(kind, i, page, out, retire)``; ``retire`` is true when the worker ran out of memory and
  leaves, so the caller starts a fresh one;
- ``None`` ends it.

A plain subprocess rather than :mod:`multiprocessing`: a Dask worker is a daemonic process,
and those may not have multiprocessing children.

The memory cap is ``RLIMIT_DATA`` (heap and private writable mappings). ``RLIMIT_AS`` would
also count address space that is reserved but never used: an idle worker has 440 MB of address
space for 148 MB of data, and about 290 MB more of each once the BLAS thread pool runs
(``bench/bench_hostile.py``; the pool grows with the number of cores, so the batch runs workers
with one BLAS thread). A cap on the address space would refuse normal pages long before memory
runs out. An allocation past the cap fails with :class:`MemoryError` in Python, or a failed
``malloc`` in the readers' C code; either way the page gets an error record naming the limit.
"""

from __future__ import annotations

import os
import resource
import signal
import sys
import time

#: Exit code of a worker that ran out of memory after answering.
RETIRED = 75


def set_memory_limit(memory_mb: int | None) -> None:
    """Cap this process's data segment at ``memory_mb`` MB (soft and hard); None for no cap."""
    if memory_mb is None:
        return
    nbytes = int(memory_mb) * 1024 * 1024
    _, hard = resource.getrlimit(resource.RLIMIT_DATA)
    if hard != resource.RLIM_INFINITY:
        nbytes = min(nbytes, hard)
    resource.setrlimit(resource.RLIMIT_DATA, (nbytes, nbytes))


def memory_message(memory_mb: int | None) -> str:
    return f"needed more than the memory limit of {memory_mb} MB per worker (--max-memory); stopped"


def serve(conn_in, conn_out) -> None:
    """Answer tasks until told to stop (runs in the worker process)."""
    from . import batch

    # The parent decides what an interrupt means: a Ctrl-C reaches the whole process group, and
    # the page running here should finish within the grace period rather than die.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _, templates, settings, limits, memory_mb = conn_in.recv()
    # Import the readers and extractors before saying ready, so no page pays for them.
    import pdfplumber  # noqa: F401
    import pypdfium2  # noqa: F401

    from .extract import raster, vector  # noqa: F401

    set_memory_limit(memory_mb)
    conn_out.send(("ready",))
    try:
        while True:
            try:
                task = conn_in.recv()
            except EOFError:
                break
            if task is None:
                break
            kind, i, path, page = task
            retire = False
            t0 = time.perf_counter()
            try:
                if kind == "plan":
                    out = batch.plan_file(path, limits)
                else:
                    out = batch.check_one(path, page, templates, settings, limits)
            except MemoryError:
                batch.forget_document()
                out = batch.failed_task(kind, path, page, memory_message(memory_mb), time.perf_counter() - t0)
                retire = True
            conn_out.send((kind, i, page, out, retire))
            if retire:
                sys.exit(RETIRED)
    finally:
        batch.forget_document()


def main(argv: list[str]) -> None:  # pragma: no cover - runs in the child
    from multiprocessing.connection import Connection

    conn_in = Connection(int(argv[0]), writable=False)
    conn_out = Connection(int(argv[1]), readable=False)
    serve(conn_in, conn_out)


if __name__ == "__main__":  # pragma: no cover
    main(sys.argv[1:])
    os._exit(0)  # skip interpreter teardown: nothing is left to flush
