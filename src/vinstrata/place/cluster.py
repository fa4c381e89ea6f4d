"""Placing new lots on a Dask cluster: the model sent once, batches placed on the workers.

The client reads the file (the two passes of :mod:`vinstrata.place.stream`)
and submits the batches, at most a few per worker in flight, so memory stays
bounded on both sides; the workers send the placements back and the client
writes them as they come, in file order. The client streams rather than
workers reading partitions because then the workers need neither the input
nor the output folder (a remote cluster at ``tcp://host:8786`` shares no
disk with the client), the file-level checks (duplicate lot ids across the
whole file, the unit check, the rejection warnings) stay in one place, the
same as in one process, and placing is what costs: about 0.4 ms a lot
against 0.04 ms for reading and validating it.

The model, its profiles and the config go to every worker once
(``Client.scatter(..., broadcast=True)``); each worker builds its
:class:`~vinstrata.place.context.PlacingContext` (the k-d trees, HDBSCAN
rebuilt) on its first batch and keeps it, keyed by the model's fingerprint
and the config.

Without an address a :class:`distributed.LocalCluster` is started on this
machine: one worker process per core with one thread each. Placing is
mostly Python and numba code holding the GIL (HDBSCAN's prediction, the flag
text), so threads in one process would queue behind each other; processes
do not, and one thread each keeps BLAS from oversubscribing the cores.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections import deque
from collections.abc import Iterator
from contextlib import contextmanager

from vinstrata.config import Config
from vinstrata.errors import InputError
from vinstrata.place.context import PlacingContext, placing_context
from vinstrata.place.placing import Placements, place_batch
from vinstrata.place.stream import Runner
from vinstrata.profile.drivers import Profiles
from vinstrata.read.lots import LotTable
from vinstrata.segment.model import StyleModel

EXTRA = "dask"  # pip install "vinstrata[dask]"
IN_FLIGHT_PER_WORKER = 2  # batches queued per worker: one placing, one arriving

_CONTEXTS: dict[str, PlacingContext] = {}  # per worker process: one context per model


def _import_distributed() -> object:
    try:
        import distributed
    except ImportError:
        raise InputError(f"--engine dask needs the '{EXTRA}' extra: "
                         f"pip install \"vinstrata[{EXTRA}]\"") from None
    return distributed


def context_key(model: StyleModel, config: Config) -> str:
    """The key a worker keeps a model's context under: its fingerprint and the config."""
    text = json.dumps(config.to_dict(), sort_keys=True, default=str)
    return f"{model.fingerprint}:{hashlib.sha256(text.encode('utf-8')).hexdigest()[:16]}"


def _place_on_worker(table: LotTable, key: str,
                     shipped: tuple[StyleModel, Profiles | None, Config]) -> Placements:
    """Place one batch on a worker, building the model's context on the first batch only."""
    context = _CONTEXTS.get(key)
    if context is None:
        _CONTEXTS.clear()  # one model at a time per worker
        context = _CONTEXTS[key] = placing_context(*shipped)
    return place_batch(table, context)


def default_workers() -> int:
    """Worker processes of a local cluster: one per core this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


@contextmanager
def dask_runner(model: StyleModel, profiles: Profiles | None, config: Config,
                scheduler: str | None = None, workers: int | None = None
                ) -> Iterator[Runner]:
    """A runner placing batches on a Dask cluster, for :func:`vinstrata.pipeline.place_stream`.

    Parameters
    ----------
    model : StyleModel
        A saved model (its fingerprint keys the workers' contexts).
    profiles : Profiles, optional
    config : Config
    scheduler : str, optional
        A scheduler's address (``tcp://host:8786``); a local cluster when None.
    workers : int, optional
        Worker processes of the local cluster (:func:`default_workers` when None).

    Yields
    ------
    callable
        Batches in, placements out, in order.

    Raises
    ------
    InputError
        The ``dask`` extra is not installed, or the scheduler cannot be reached.
    """
    distributed = _import_distributed()
    key = context_key(model, config)
    cluster = None
    try:
        if scheduler is None:
            cluster = distributed.LocalCluster(
                n_workers=workers or default_workers(), threads_per_worker=1,
                processes=True, dashboard_address=None, silence_logs=40)
            client = distributed.Client(cluster)
        else:
            client = distributed.Client(scheduler, timeout="30s")
    except OSError as exc:
        if cluster is not None:
            cluster.close()
        raise InputError(f"--scheduler {scheduler}: cannot connect ({exc})") from None
    try:
        shipped = client.scatter((model, profiles, config), broadcast=True, hash=False)
        n_workers = max(1, len(client.scheduler_info()["workers"]))

        def run(tables: Iterator[LotTable]) -> Iterator[Placements]:
            pending: deque = deque()
            for n, table in enumerate(tables):
                pending.append(client.submit(_place_on_worker, table, key, shipped,
                                             key=f"vinstrata-place-{key[:12]}-{n}",
                                             pure=False))
                while len(pending) >= IN_FLIGHT_PER_WORKER * n_workers:
                    yield pending.popleft().result()
            while pending:
                yield pending.popleft().result()

        yield run
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
