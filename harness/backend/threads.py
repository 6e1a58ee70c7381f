"""Thread counts of the harness's own numerical work (never the plug-in's).

Two thread pools share the cores in a harness process: pyscf's OpenMP workers (integrals,
J/K) and numpy's and scipy's BLAS threads (OpenBLAS or MKL, the matrix products of the
checks). After each pyscf call its OpenMP workers keep spinning for a while; a BLAS call
made then with as many threads as cores waits for cores those workers hold. On a case of
100-odd basis functions the checks make hundreds of mid-size BLAS calls between pyscf
calls, and the fight costs more than a second BLAS thread gains (numbers at
``SINGLE_BLAS_THREAD_BELOW_AO``). Environment variables (``OPENBLAS_NUM_THREADS``,
``OMP_WAIT_POLICY``) would also reach the plug-in's child processes and must be set before
the libraries load, so the limits here are set at run time, in this process only,
through threadpoolctl.
"""

from __future__ import annotations

import contextlib

#: Below this many basis functions the checks run with one BLAS thread. Measured on the
#: 2-core machine of DEVELOPERS.md (2026-12-05, OpenBLAS 0.3.31, pyscf 2.14):
#: benzene/cc-pVDZ (114 AO) all checks 0.18 s with one BLAS thread against 0.38–0.41 s
#: with two, the stability analysis 1.8 s against 2.9 s; 35 n×n products and an eigh just
#: after a pyscf OpenMP call gain from a second thread only from about 200 AO (n = 200:
#: 1.04×, 400: 1.6×, 800: 1.9×). Above it the default thread count is kept.
SINGLE_BLAS_THREAD_BELOW_AO = 256


def limit_blas(threads: int) -> None:
    """Limit numpy's and scipy's BLAS to ``threads`` threads in this process from now on
    (threadpoolctl; environment variables are too late once numpy is loaded); without
    threadpoolctl nothing happens. Never raises."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - a dependency; kept for a bare install
        return
    try:
        threadpool_limits(limits=max(1, int(threads)), user_api="blas")
    except Exception:  # pragma: no cover - an unusual BLAS
        pass


def use_threads(threads: int) -> None:
    """pyscf's OpenMP threads and the BLAS threads of this process, both ``threads``
    (at least 1) from now on: a plug-in process's share of the cores with ``--jobs N``, a
    judge worker's share or a judge task's. Never raises."""
    threads = max(1, int(threads))
    try:
        from harness.backend.mole import set_threads

        set_threads(threads)
    except Exception:  # pragma: no cover - pyscf without OpenMP
        pass
    limit_blas(threads)


@contextlib.contextmanager
def checks_threads(nao: int):
    """The BLAS threads of the checks of an ``nao``-function case, for the ``with`` block:
    one below ``SINGLE_BLAS_THREAD_BELOW_AO`` (restored after), else unchanged. Never
    raises on its own account."""
    if nao >= SINGLE_BLAS_THREAD_BELOW_AO:
        yield
        return
    try:
        from threadpoolctl import threadpool_limits

        limits = threadpool_limits(limits=1, user_api="blas")
    except Exception:  # pragma: no cover - no threadpoolctl, an unusual BLAS
        limits = None
    try:
        yield
    finally:
        if limits is not None:
            limits.restore_original_limits()


def blas_threads() -> int | None:
    """The largest thread count of the loaded BLAS libraries (None without
    threadpoolctl): what a test or the benchmark reads back."""
    try:
        from threadpoolctl import threadpool_info
    except ImportError:  # pragma: no cover
        return None
    counts = [i["num_threads"] for i in threadpool_info() if i.get("user_api") == "blas"]
    return max(counts) if counts else None
