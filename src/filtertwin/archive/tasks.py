"""The archive's tasks, one per file, run serially, on Dask's local scheduler or on a cluster.

Every task is :func:`filtertwin.archive.scan.scan_file` on one path; results come back in the
order of the paths whatever the order they finish in, and a task gives the same result
wherever it runs, so a serial loop, the local scheduler and a cluster agree exactly.

The local scheduler uses threads: the work of a task happens in GIL-free code (the numba
runner and resampling kernels, scipy's FIR and FFTs, libsndfile), so threads run side by side
without starting processes or copying results between them (measured against Dask's
processes scheduler: see DEVELOPERS.md, the archive path). A cluster is reached with
``dask.distributed`` (the ``cluster`` extra), imported only when an address is given.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from filtertwin.archive.scan import FileResult, ScanSpec, scan_file
from filtertwin.errors import UserInputError

__all__ = ["Progress", "run_serial", "run_tasks"]

Progress = Callable[[FileResult], None]
"""Called once per finished file (in the order they finish)."""


def run_serial(
    paths: Sequence[Path], spec: ScanSpec, progress: Progress | None = None
) -> list[FileResult]:
    """A plain loop over the files in this thread (the reference the others must equal)."""
    results = []
    for path in paths:
        result = scan_file(path, spec)
        if progress is not None:
            progress(result)
        results.append(result)
    return results


def run_tasks(
    paths: Sequence[Path],
    spec: ScanSpec,
    *,
    workers: int | None = None,
    address: str | None = None,
    progress: Progress | None = None,
) -> list[FileResult]:
    """Run one Dask task per file; results in the order of ``paths``.

    Parameters
    ----------
    paths : sequence of Path
    spec : ScanSpec
    workers : int, optional
        Threads of the local scheduler (default: one per CPU). Ignored with ``address``.
    address : str, optional
        A ``dask.distributed`` scheduler (``tcp://127.0.0.1:8786``); its workers must be able
        to read the files at the same paths.
    progress : callable, optional
        Called with each :class:`FileResult` as it finishes.

    Raises
    ------
    UserInputError
        ``dask.distributed`` missing, or no scheduler at ``address``.
    """
    if address is not None:
        return _on_cluster(paths, spec, address, progress)
    import dask
    from dask.callbacks import Callback

    tasks = [dask.delayed(scan_file, pure=True)(str(p), spec) for p in paths]

    class _Report(Callback):  # type: ignore[misc]
        def _posttask(self, key: Any, result: Any, dsk: Any, state: Any, worker_id: Any) -> None:
            if progress is not None and isinstance(result, FileResult):
                progress(result)

    with _Report():
        results = dask.compute(*tasks, scheduler="threads", num_workers=workers)
    return list(results)


def _on_cluster(
    paths: Sequence[Path], spec: ScanSpec, address: str, progress: Progress | None
) -> list[FileResult]:
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise UserInputError(
            "running on a cluster needs dask.distributed; install it with "
            "pip install 'filtertwin[cluster]' (or pip install distributed)"
        ) from None
    try:
        client = Client(address, timeout="10s")
    except (OSError, TimeoutError) as exc:
        reason = " ".join(str(exc).split())
        raise UserInputError(
            f"no Dask scheduler answers at {address} ({reason}); start one with "
            "'dask scheduler' and give its address"
        ) from None
    with client:
        futures = client.map(scan_file, [str(p) for p in paths], spec=spec, pure=False)
        for future in as_completed(futures):
            if progress is not None:
                progress(future.result())
        results: list[FileResult] = client.gather(futures)
    return results
