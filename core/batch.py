"""Processing many shots of a session: worker processes (or a dask cluster) measure, one writer
saves.

Workers read a shot's frames and run ``measure_shot``; only the calling process writes to the
session, saving each result as it arrives, so an interrupted run keeps every finished shot and the
next run resumes with the rest. The same generator serves the command line (a progress bar) and
the window (a worker thread with progress and cancel)::

    for outcome in iter_process(session, workers=2, should_stop=flag.is_set):
        print(outcome.shot_id, outcome.ok, outcome.done, outcome.total)
"""

from __future__ import annotations

import multiprocessing
import signal
import time
import uuid
from collections.abc import Callable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field, replace

from core import WakelineError
from core.shot import ShotSettings
from core.store import Session, read_frames

_POLL_S = 0.2  # how often a waiting run looks at should_stop


@dataclass
class ShotOutcome:
    """One shot finished and saved: ``ok`` or failed with ``message``; ``done`` of ``total``."""

    shot_id: str
    ok: bool
    message: str
    done: int
    total: int


@dataclass
class BatchReport:
    """What a run did. ``total`` counts the shots it set out to process."""

    total: int = 0
    processed: list[str] = field(default_factory=list)
    failed: dict[str, str] = field(default_factory=dict)
    skipped: list[str] = field(default_factory=list)  # already done with the same settings
    interrupted: bool = False
    elapsed_s: float = 0.0

    @property
    def not_run(self) -> int:
        """Shots left for a later run (stopped before they finished)."""
        return self.total - len(self.processed) - len(self.failed)


def plan_shots(session: Session, shot_ids=None, force: bool = False) -> tuple[list[str], list[str]]:
    """Split the chosen shots into (to process, already processed with the same settings).

    Raises
    ------
    WakelineError
        When a requested shot id is not in the session.
    """
    chosen = list(session) if shot_ids is None else list(dict.fromkeys(shot_ids))
    for shot_id in chosen:
        session[shot_id]  # raises for an unknown id
    todo = [s for s in chosen if force or session.needs_processing(s)]
    planned = set(todo)
    return todo, [s for s in chosen if s not in planned]


def iter_process(
    session: Session,
    shot_ids=None,
    workers: int | None = None,
    scheduler=None,
    force: bool = False,
    should_stop: Callable[[], bool] | None = None,
) -> Iterator[ShotOutcome]:
    """Process shots and yield each outcome right after it is saved in the session.

    Parameters
    ----------
    session : Session
        Open for writing; only this generator's thread touches it while it runs.
    shot_ids : list of str, optional
        Shots to consider (default all); those already processed with the same settings are
        left out unless ``force``.
    workers : int, optional
        Worker processes, each measuring one shot at a time single-threaded (default: all
        cores); 0 measures in this process with the PIV settings' own thread count.
    scheduler : str or distributed.Client, optional
        ``tcp://host:port`` of a dask scheduler (or a client): measure on that cluster instead.
        Its workers must see the frame files and the session file at the same paths.
    should_stop : callable, optional
        Polled while waiting; when it returns True, unstarted shots are cancelled and the
        generator ends after saving what has finished.
    """
    todo, _ = plan_shots(session, shot_ids, force)
    tasks = [_task(session, shot_id) for shot_id in todo]
    fingerprints = {task["shot_id"]: task["fingerprint"] for task in tasks}
    stop = should_stop or (lambda: False)
    runner = _runner(workers, scheduler)
    with session.batch_run():
        for done, (shot_id, result, message) in enumerate(runner(tasks, stop), start=1):
            if result is not None:
                session.save_result(shot_id, result)
            else:
                session.save_failure(shot_id, message, fingerprints[shot_id])
            yield ShotOutcome(shot_id, result is not None, message, done, len(tasks))


def process_shots(
    session: Session,
    shot_ids=None,
    workers: int | None = None,
    scheduler=None,
    force: bool = False,
    on_result: Callable[[ShotOutcome], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> BatchReport:
    """Run :func:`iter_process` to the end and report; ``on_result(outcome)`` after each shot.

    A stop request (``should_stop``) or Ctrl-C ends the run with ``interrupted=True``; every
    shot saved until then stays saved.
    """
    start = time.perf_counter()
    todo, skipped = plan_shots(session, shot_ids, force)
    report = BatchReport(total=len(todo), skipped=skipped)
    stop = should_stop or (lambda: False)
    outcomes = iter_process(session, todo, workers, scheduler, force=True, should_stop=stop)
    try:
        for outcome in outcomes:
            if outcome.ok:
                report.processed.append(outcome.shot_id)
            else:
                report.failed[outcome.shot_id] = outcome.message
            if on_result is not None:
                on_result(outcome)
    except KeyboardInterrupt:
        report.interrupted = True
    finally:
        outcomes.close()
    report.interrupted = report.interrupted or report.not_run > 0
    report.elapsed_s = time.perf_counter() - start
    return report


# ---------------------------------------------------------------------------------------------
# Work items (plain dicts, picklable, no Session inside)


def _task(session: Session, shot_id: str) -> dict:
    settings = session.settings_for(shot_id)
    return {
        "shot_id": shot_id,
        "source": session.frame_source(shot_id),
        "settings": settings.to_dict(),
        "fingerprint": settings.fingerprint(),
    }


def measure_task(task: dict, piv_threads: int | None = None):
    """Read one shot's frames and measure it (runs in a worker).

    Returns
    -------
    (shot_id, ShotResult or None, message)
        ``message`` is the one-line reason when the shot failed.
    """
    from core.shot import measure_shot

    shot_id = task["shot_id"]
    settings = ShotSettings.from_dict(task["settings"])
    try:
        frame_a, frame_b = read_frames(shot_id, task["source"])
        # The thread count changes speed, not the result; the stored settings stay the session's.
        run_settings = settings if piv_threads is None else replace(
            settings, piv=replace(settings.piv, workers=piv_threads))
        result = measure_shot(frame_a, frame_b, run_settings)
        result.settings = settings
        return shot_id, result, ""
    except WakelineError as exc:
        return shot_id, None, str(exc)
    except MemoryError:
        return shot_id, None, "out of memory while measuring"
    except Exception as exc:  # noqa: BLE001 - one bad shot must not stop the batch; keep its reason
        text = str(exc).splitlines()[0] if str(exc) else ""
        return shot_id, None, f"{type(exc).__name__}: {text}".rstrip(": ")


# ---------------------------------------------------------------------------------------------
# Runners: each yields (shot_id, result or None, message) in completion order


def _runner(workers: int | None, scheduler):
    if scheduler is not None:
        return lambda tasks, stop: _run_dask(tasks, stop, scheduler)
    if workers == 0:
        return _run_inline
    count = workers or multiprocessing.cpu_count()
    if count < 0:
        raise WakelineError(f"--workers {workers}: use 0 or more")
    return lambda tasks, stop: _run_pool(tasks, stop, count)


def _run_inline(tasks: list[dict], stop) -> Iterator[tuple]:
    for task in tasks:
        if stop():
            return
        yield measure_task(task)


def _ignore_sigint() -> None:
    # Ctrl-C belongs to the writer, which stops the run cleanly; workers finish their shot.
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _pool_context():
    # Not fork: the parent may run Qt or other threads, which fork does not copy safely.
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    context = multiprocessing.get_context("forkserver")
    # Workers fork from a server that has imported the measurement once: quick pool start-up.
    context.set_forkserver_preload(
        ["core.batch", "core.piv", "core.ball", "core.fields", "core.separation"])
    return context


def _run_pool(tasks: list[dict], stop, count: int) -> Iterator[tuple]:
    if not tasks:
        return
    count = min(count, len(tasks))
    # One worker process is one core's worth of work: the PIV inside it runs single-threaded.
    pool = ProcessPoolExecutor(count, mp_context=_pool_context(), initializer=_ignore_sigint)
    futures = {pool.submit(measure_task, task, 1): task["shot_id"] for task in tasks}
    pending = set(futures)
    try:
        while pending and not stop():
            finished, pending = wait(pending, timeout=_POLL_S, return_when=FIRST_COMPLETED)
            for future in finished:
                yield _pool_outcome(future, futures[future])
    finally:
        for future in pending:
            future.cancel()
        pool.shutdown(wait=True, cancel_futures=True)


def _pool_outcome(future, shot_id: str) -> tuple:
    try:
        return future.result()
    except Exception as exc:  # noqa: BLE001 - the worker process died (killed, out of memory, crashed)
        return shot_id, None, f"worker process failed ({type(exc).__name__})"


def _run_dask(tasks: list[dict], stop, scheduler) -> Iterator[tuple]:
    try:
        import distributed
    except ImportError:
        raise WakelineError(
            "--scheduler needs dask.distributed (install the 'cluster' extra)") from None
    own = isinstance(scheduler, str)
    try:
        client = distributed.Client(scheduler, set_as_default=False, timeout=10) if own else scheduler
    except (OSError, TimeoutError) as exc:
        raise WakelineError(f"{scheduler}: cannot reach the dask scheduler ({exc})") from None
    run = uuid.uuid4().hex[:8]
    futures = {client.submit(measure_task, task, 1, key=f"wakeline-{run}-{i}", pure=False):
               task["shot_id"] for i, task in enumerate(tasks)}
    arriving = distributed.as_completed(list(futures), loop=client.loop)
    try:
        while not arriving.is_empty() and not stop():
            ready = arriving.next_batch(block=False)
            if not ready:
                time.sleep(_POLL_S / 4)
            for future in ready:
                yield _dask_outcome(future, futures[future])
    finally:
        unfinished = [f for f in futures if not f.done()]
        if unfinished:
            client.cancel(unfinished)
        if own:
            client.close()


def _dask_outcome(future, shot_id: str) -> tuple:
    try:
        return future.result()
    except Exception as exc:  # noqa: BLE001 - the task was lost on the cluster
        return shot_id, None, f"cluster task failed ({type(exc).__name__}: {exc})"
