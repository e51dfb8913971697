"""Read-ahead: a forked child reads and decodes the bag while this process runs the core.

Reading a bag and decoding its messages (``bag.BagSource.iter_samples``) and running the
monitor are both Python work. On a machine with two or more usable cores a child process
(``fork``) does the reading while the parent runs the monitor, so a replay takes about the
time of the monitor alone. The child sends the samples in batches, in the order
``iter_samples`` gives them, as marshalled tuples of their fields; the parent rebuilds the
same sample objects, so the results are those of reading in-process. At the end the
child's bookkeeping (messages read, rejections, damage, late and time-jump counts) is
copied onto the parent's source, and an exception in the child is raised in the parent.

Only the child uses the opened bag after the fork; the parent just closes its copy.
"""

from __future__ import annotations

import dataclasses
import marshal
import multiprocessing
import os
import pickle
from collections.abc import Callable, Iterator
from multiprocessing.connection import Connection
from typing import Any

from kinematic_monitor.core.ordering import TimeReset
from kinematic_monitor.core.samples import (
    ChassisSample,
    GnssSample,
    ImuSample,
    LocalizationSample,
    Sample,
)
from kinematic_monitor.io.sources import Progress, SampleSource

# sample classes sent as field tuples: (kind, field, field, ...), kind = index here
SAMPLE_CLASSES: tuple[type, ...] = (ImuSample, ChassisSample, LocalizationSample, GnssSample)
OTHER = -1  # anything else: (OTHER, pickle bytes)
BATCH = 1024  # samples per pipe message
MIN_MESSAGES = 20_000  # below this the fork costs more than it saves (auto mode)

_TAG_BATCH, _TAG_PICKLED, _TAG_END, _TAG_ERROR = b"B", b"P", b"E", b"X"


_SCALARS = frozenset({float, int, str, bool, type(None)})


def _plain(row: tuple[Any, ...]) -> bool:
    """True when marshal carries every value of ``row`` as it is: builtin scalars and
    tuples of them. (marshal would write a numpy scalar, a float subclass with the buffer
    protocol, as bytes.)"""
    for v in row:
        t = type(v)
        if t not in _SCALARS and not (t is tuple and all(type(x) in _SCALARS for x in v)):
            return False
    return True


def _encode(position: int, batch: list[tuple[Any, ...]], plain: bool) -> bytes:
    """A batch message: marshal (fast) when every row is ``_plain``, else pickle."""
    if plain:
        return _TAG_BATCH + marshal.dumps((position, batch))
    return _TAG_PICKLED + pickle.dumps((position, batch))


def usable_cores() -> int:
    """CPU cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # not Linux
        return os.cpu_count() or 1


def available() -> bool:
    """True where a read-ahead child can run: ``fork`` exists, two or more usable cores,
    and this process may have children (a daemonic worker, e.g. a Dask one, may not)."""
    if "fork" not in multiprocessing.get_all_start_methods():
        return False
    if multiprocessing.current_process().daemon:
        return False
    return usable_cores() >= 2


def wanted(mode: str, message_count: int) -> bool:
    """Whether to read ahead for ``--read-ahead MODE`` ('auto', 'on', 'off').

    'auto': where :func:`available` and the bag holds at least ``MIN_MESSAGES`` messages on
    the used topics; 'on': where available; 'off': never.
    """
    if mode not in ("auto", "on", "off"):
        raise ValueError(f"read-ahead mode {mode!r}: expected auto, on or off")
    if mode == "off" or not available():
        return False
    return mode == "on" or message_count >= MIN_MESSAGES


def _field_names(cls: type) -> tuple[str, ...]:
    return tuple(f.name for f in dataclasses.fields(cls))


def _maker(cls: type) -> Callable[[tuple[Any, ...]], Any]:
    """A function building ``cls`` from (kind, field values...) without ``__init__``.

    The sample classes are frozen slotted dataclasses without ``__post_init__``: setting
    each slot directly gives the object ``__init__`` would give for the same values.
    """
    names = _field_names(cls)
    if hasattr(cls, "__post_init__") or not all(
            type(cls.__dict__.get(n)).__name__ == "member_descriptor" for n in names):
        raise TypeError(f"{cls.__name__}: not a slotted dataclass without __post_init__")
    env: dict[str, Any] = {"new": object.__new__, "cls": cls}
    lines = ["def make(t):", "    o = new(cls)"]
    for i, n in enumerate(names):
        env[f"set{i}"] = cls.__dict__[n].__set__
        lines.append(f"    set{i}(o, t[{i + 1}])")
    lines.append("    return o")
    exec("\n".join(lines), env)  # noqa: S102 - generated from the dataclass fields only
    return env["make"]  # type: ignore[no-any-return]


def _child(source: SampleSource, conn: Connection) -> None:
    """Child process: read every sample, send batches, then the bookkeeping."""
    from operator import attrgetter

    kinds = {cls: k for k, cls in enumerate(SAMPLE_CLASSES)}
    getters = [attrgetter(*_field_names(cls)) for cls in SAMPLE_CLASSES]
    batch: list[tuple[Any, ...]] = []
    plain = True
    send = conn.send_bytes
    try:
        for s in source.iter_samples():
            k = kinds.get(type(s))
            if k is None:
                batch.append((OTHER, pickle.dumps(s)))
            else:
                row = (k, *getters[k](s))
                if plain and not _plain(row):
                    plain = False
                batch.append(row)
            if len(batch) >= BATCH:
                send(_encode(source.position, batch, plain))
                batch, plain = [], True
        send(_encode(source.position, batch, plain))
        send(_TAG_END + pickle.dumps((source.position, source.stats, source.damage,
                                      source.out_of_order, source.late_by,
                                      source.time_jumps, source.warnings, source.fixes)))
    except BaseException as exc:  # noqa: BLE001 - every failure goes to the parent
        try:
            payload = pickle.dumps(exc)
        except Exception:  # noqa: BLE001 - an exception that does not pickle
            payload = pickle.dumps(RuntimeError(f"{type(exc).__name__}: {exc}"))
        try:  # what was read before the failure first, as in-process reading gives it
            if batch:
                send(_encode(source.position, batch, plain))
            send(_TAG_ERROR + payload)
        except OSError:  # the parent has gone
            pass
    finally:
        conn.close()


def iter_samples(source: SampleSource, progress: Progress | None = None,
                 progress_every: int = 5000) -> Iterator[Sample | TimeReset]:
    """``source.iter_samples(progress, progress_every)`` with the reading done in a child.

    Yields the same samples in the same order; afterwards ``source`` carries the child's
    bookkeeping. Raises in the parent what the child raised. Closing the generator early
    stops the child.
    """
    ctx = multiprocessing.get_context("fork")
    recv_end, send_end = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_child, args=(source, send_end),
                       name="kinematic_monitor read-ahead", daemon=True)
    proc.start()
    send_end.close()
    makers = [_maker(cls) for cls in SAMPLE_CLASSES]
    total = source.message_count
    next_report = progress_every
    loads = marshal.loads
    finished = False
    try:
        while True:
            try:
                data = recv_end.recv_bytes()
            except EOFError:
                proc.join(timeout=5.0)
                raise RuntimeError("read-ahead: the reading process ended without a result "
                                   f"(exit code {proc.exitcode})") from None
            tag, body = data[:1], data[1:]
            if tag == _TAG_BATCH or tag == _TAG_PICKLED:
                position, batch = loads(body) if tag == _TAG_BATCH else pickle.loads(body)
                for t in batch:
                    k = t[0]
                    yield makers[k](t) if k >= 0 else pickle.loads(t[1])
                if progress is not None and position >= next_report:
                    progress(position, total)
                    next_report = (position // progress_every + 1) * progress_every
            elif tag == _TAG_END:
                finished = True
                (source.position, source.stats, source.damage, source.out_of_order,
                 source.late_by, source.time_jumps, source.warnings,
                 source.fixes) = pickle.loads(body)
                if progress is not None:
                    progress(source.position, total)
                return
            else:
                finished = True
                raise pickle.loads(body)
    finally:
        recv_end.close()
        if not finished:  # the consumer stopped early: the child is not needed
            proc.terminate()
        proc.join(timeout=5.0)
