"""Where the independent statistics of a run are computed: in this process, or on Dask.

The cluster step's statistics — local statistics per period, global Moran per period, the local
statistic of the change between two periods, and the per-unit trends — do not depend on each
other. :class:`Executor` runs such independent calls: :class:`SerialExecutor` (the default)
one after the other in this process; :class:`DaskExecutor` as tasks on a ``dask.distributed``
cluster (an existing scheduler's address, or a local cluster it starts and stops). Every call
gets exactly the same arguments (seeds included) on either path, so the results are
byte-identical; only where they are computed differs. No process pool of our own.

Config::

    [compute]
    scheduler = "dask"          # "serial" (default) or "dask"
    address = "tcp://10.0.0.5:8786"   # optional: an existing Dask scheduler
    workers = 2                 # local cluster size when no address is given

Needs ``pip install 'mapdrift[dask]'`` for the Dask path.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from mapdrift.errors import ConfigError, check_choice

__all__ = ["ComputeSpec", "DaskExecutor", "Executor", "SerialExecutor", "executor_for"]

SCHEDULERS = ("serial", "dask")


@dataclass(frozen=True)
class ComputeSpec:
    """The ``[compute]`` section: ``scheduler`` (serial | dask), ``address``, ``workers``."""

    scheduler: str = "serial"
    address: str | None = None
    workers: int = 2

    def __post_init__(self) -> None:
        check_choice("[compute] scheduler", self.scheduler, SCHEDULERS)
        if self.workers < 1:
            raise ConfigError(f"[compute] workers must be 1 or more, got {self.workers}")


class Executor:
    """Runs independent calls ``fn(*args)``; results come back in the order given."""

    def run(self, calls: Sequence[tuple[Callable[..., Any], tuple[Any, ...]]]) -> list[Any]:
        raise NotImplementedError

    def close(self) -> None:
        """Release what the executor started (nothing for the serial one)."""

    def __enter__(self) -> Executor:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


class SerialExecutor(Executor):
    """One call after the other, in this process (the default)."""

    def run(self, calls: Sequence[tuple[Callable[..., Any], tuple[Any, ...]]]) -> list[Any]:
        return [fn(*args) for fn, args in calls]

    def __repr__(self) -> str:
        return "SerialExecutor()"


class DaskExecutor(Executor):
    """Calls as tasks on a ``dask.distributed`` cluster.

    ``client`` may be an existing ``distributed.Client``; else ``address`` connects to a running
    scheduler, and without either a ``LocalCluster`` of ``workers`` single-threaded worker
    processes is started (and closed by :meth:`close`). Large arguments (the value array, the
    weights) are sent once per call; results are gathered in order.
    """

    def __init__(self, *, client: Any = None, address: str | None = None, workers: int = 2) -> None:
        try:
            from distributed import Client, LocalCluster
        except ImportError:
            raise ConfigError(
                "[compute] scheduler = \"dask\" needs Dask: pip install 'mapdrift[dask]' (or set "
                'scheduler = "serial")'
            ) from None
        self._own: list[Any] = []
        if client is not None:
            self.client = client
        elif address:
            try:
                self.client = Client(address, timeout="10s")
            except OSError as exc:
                raise ConfigError(
                    f"[compute] address {address!r}: no Dask scheduler answered ({exc}); start "
                    "one or leave address out for a local cluster"
                ) from None
            self._own.append(self.client)
        else:
            cluster = LocalCluster(
                n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None
            )
            self.client = Client(cluster)
            self._own += [self.client, cluster]

    def run(self, calls: Sequence[tuple[Callable[..., Any], tuple[Any, ...]]]) -> list[Any]:
        futures = [self.client.submit(fn, *args, pure=False) for fn, args in calls]
        return list(self.client.gather(futures))

    def close(self) -> None:
        for obj in self._own:
            obj.close()
        self._own = []

    def __repr__(self) -> str:
        return f"DaskExecutor({self.client!r})"


def executor_for(spec: ComputeSpec | None) -> Executor:
    """The executor a ``[compute]`` section asks for (serial when ``spec`` is None)."""
    if spec is None or spec.scheduler == "serial":
        return SerialExecutor()
    return DaskExecutor(address=spec.address, workers=spec.workers)
