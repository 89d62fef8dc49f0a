"""Per-product work spread over the machine's cores.

The fits of one product line do not depend on another's, so with many product lines the stages that loop
over products (the reporting-delay correction, the life fits) hand the products to worker processes
(forked: the data they need is already in memory). Results come back in the order given, so a run gives
the same tables whatever the number of workers. Few products, or one worker, run in this process: starting
processes costs more than it saves.
"""

from __future__ import annotations

import copyreg
import multiprocessing
import os
import signal
import types
from concurrent.futures import ProcessPoolExecutor
from typing import Any, Callable, Sequence, TypeVar

Result = TypeVar("Result")

MIN_PRODUCTS_FOR_WORKERS = 32  # below this, the products are fitted in this process


def _mapping_proxy(items: dict[Any, Any]) -> types.MappingProxyType:
    return types.MappingProxyType(items)


def _reduce_mapping_proxy(proxy: types.MappingProxyType) -> tuple[Callable[..., Any], tuple[dict[Any, Any]]]:
    return _mapping_proxy, (dict(proxy),)


# the fitted results hold read-only mappings (MappingProxyType), which pickle cannot carry by itself
copyreg.pickle(types.MappingProxyType, _reduce_mapping_proxy)


def worker_count(configured: int) -> int:
    """The number of worker processes: `configured`, or every core the process may use when it is 0."""
    if configured < 0:
        raise ValueError(f"workers must be >= 0, got {configured!r}")
    if configured:
        return configured
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not Linux
        return max(1, os.cpu_count() or 1)


def map_products(
    function: Callable[..., Result],
    arguments: Sequence[tuple[Any, ...]],
    workers: int,
    min_products: int | None = None,
    fold: Callable[[Result], Result] | None = None,
) -> list[Result]:
    """[function(*a) for a in arguments], in worker processes when `workers` > 1 and there are at least
    `min_products` items (default MIN_PRODUCTS_FOR_WORKERS; `function` must be a module-level function, its
    arguments and result picklable). `fold`: called on each result as it arrives, in the order given; what
    it returns is kept (e.g. a running sum takes a large array out of each result, so the results of
    thousands of products are never all held at once)."""
    min_products = MIN_PRODUCTS_FOR_WORKERS if min_products is None else min_products
    keep = fold if fold is not None else _same
    if workers <= 1 or len(arguments) < min_products or "fork" not in multiprocessing.get_all_start_methods():
        return [keep(function(*items)) for items in arguments]
    chunk = max(1, len(arguments) // (workers * 4))
    pool = ProcessPoolExecutor(
        max_workers=workers, mp_context=multiprocessing.get_context("fork"), initializer=_stop_on_signals
    )
    try:
        results = [keep(result) for result in pool.map(_call, [(function, items) for items in arguments], chunksize=chunk)]
    except BaseException:
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown(wait=True)
    return results


def _same(result: Result) -> Result:
    return result


def _stop_on_signals() -> None:
    """A worker ends at once on SIGINT / SIGTERM. Forked, it inherits the run's handler, which raises an
    exception to stop the run: in a worker that exception only fails the item at hand and the worker goes
    on with the next, so a stopped run would wait for the whole stage (seen on the 2,000-line bench)."""
    for number in (signal.SIGINT, signal.SIGTERM):
        signal.signal(number, signal.SIG_DFL)


def _call(job: tuple[Callable[..., Result], tuple[Any, ...]]) -> Result:
    function, items = job
    return function(*items)
