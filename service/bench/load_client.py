"""A lean closed-loop HTTP/1.1 load generator, run in its own process by ``bench query``.

``concurrency`` keep-alive connections are opened before the clock starts; each sends
one request, waits for the whole answer, then sends the next (drawn at random from
pre-built request bytes), until ``seconds`` have passed; requests in flight then finish.
Latency is from the write of a request to the last byte of its body. A non-2xx answer,
a refused or dropped connection, an unparsable answer and a timeout are errors; after a
connection error the slot reconnects (connect time is never counted as latency).

asyncio protocols (on uvloop when installed) with the request bytes built in advance
and only the status line and framing parsed (service.bench.http_parser) keep the
client's CPU per request low, which
matters when client and server share two cores. A warm-up phase on the same connections
(the first query of a process loads the index version) precedes the measured one.

As a process: ``python -m service.bench.load_client`` reads a JSON spec on stdin, writes
``start`` on stdout when the measured phase begins and one JSON result line at its end.
"""

from __future__ import annotations

import asyncio
import json
import math
import random
import resource
import sys
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any, cast

from service.bench.http_parser import ProtocolError, Response, ResponseParser

START_LINE = "start"


@dataclass(frozen=True)
class LoadSpec:
    host: str
    port: int
    requests: Sequence[bytes]  # whole HTTP/1.1 requests, each sent as is
    concurrency: int = 32
    seconds: float = 10.0
    warmup_seconds: float = 0.0
    timeout: float = 30.0  # per request in the measured phase
    warmup_timeout: float = 120.0  # the first query may load an index version
    seed: int = 0

    def to_json(self) -> str:
        return json.dumps(asdict(self) | {"requests": [r.decode("latin-1") for r in self.requests]})

    @classmethod
    def from_json(cls, text: str) -> LoadSpec:
        data = json.loads(text)
        data["requests"] = [r.encode("latin-1") for r in data["requests"]]
        return cls(**data)


@dataclass
class _Tally:
    latencies: list[float] = field(default_factory=list)  # seconds, 2xx answers only
    statuses: Counter[int] = field(default_factory=Counter)
    failures: Counter[str] = field(default_factory=Counter)  # errors without a status

    @property
    def requests(self) -> int:
        return sum(self.statuses.values()) + sum(self.failures.values())

    @property
    def errors(self) -> int:
        bad = sum(n for status, n in self.statuses.items() if not 200 <= status < 300)
        return bad + sum(self.failures.values())


def percentile(sorted_values: Sequence[float], q: float) -> float | None:
    """The nearest-rank ``q``-quantile (0 < q <= 1) of ascending values; None if empty."""
    if not sorted_values:
        return None
    # The smallest value with at least q of all values at or below it; the epsilon keeps
    # 0.99 * 100 from rounding up to rank 100.
    rank = max(1, math.ceil(q * len(sorted_values) - 1e-9))
    return sorted_values[min(rank, len(sorted_values)) - 1]


def summarise(tally: _Tally, seconds: float, cpu_seconds: float) -> dict[str, Any]:
    """The result fields: requests, errors, rps, p50_ms, p99_ms and a few more."""
    ordered = sorted(tally.latencies)

    def ms(value: float | None) -> float | None:
        return None if value is None else round(value * 1000.0, 3)

    return {
        "requests": tally.requests,
        "errors": tally.errors,
        "rps": round(tally.requests / seconds, 1) if seconds > 0 else None,
        "p50_ms": ms(percentile(ordered, 0.50)),
        "p99_ms": ms(percentile(ordered, 0.99)),
        "p90_ms": ms(percentile(ordered, 0.90)),
        "max_ms": ms(ordered[-1] if ordered else None),
        "mean_ms": ms(sum(ordered) / len(ordered) if ordered else None),
        "seconds": round(seconds, 3),
        "statuses": {str(k): v for k, v in sorted(tally.statuses.items())},
        "failures": dict(sorted(tally.failures.items())),
        "client_cpu_seconds": round(cpu_seconds, 3),
    }


class _Connection(asyncio.Protocol):
    """One keep-alive connection; ``send`` returns a future of the next response."""

    def __init__(self, loop: asyncio.AbstractEventLoop) -> None:
        self._loop = loop
        self._parser = ResponseParser()
        self._waiter: asyncio.Future[Response] | None = None
        self._transport: asyncio.Transport | None = None
        self.closed = False

    def connection_made(self, transport: asyncio.BaseTransport) -> None:
        # uvloop's transports are not asyncio.Transport subclasses, but have its methods.
        self._transport = cast(asyncio.Transport, transport)

    def data_received(self, data: bytes) -> None:
        try:
            responses = self._parser.feed(data)
        except ProtocolError as exc:
            self._fail(exc)
            self.abort()
            return
        for response in responses:
            if self._waiter is None or self._waiter.done():
                self._fail(ProtocolError("an answer nobody asked for"))
                self.abort()
                return
            self._waiter.set_result(response)
            self._waiter = None

    def eof_received(self) -> bool:
        response = self._parser.close()
        if response is not None and self._waiter is not None and not self._waiter.done():
            self._waiter.set_result(response)
            self._waiter = None
        return False  # let the transport close

    def connection_lost(self, exc: Exception | None) -> None:
        self.closed = True
        self._fail(ConnectionResetError("the server closed the connection"))

    def send(self, request: bytes) -> asyncio.Future[Response]:
        assert self._transport is not None and self._waiter is None
        self._waiter = self._loop.create_future()
        self._transport.write(request)
        return self._waiter

    def expire(self) -> None:
        self._fail(TimeoutError("no complete answer in time"))
        self.abort()

    def abort(self) -> None:
        self.closed = True
        if self._transport is not None:
            self._transport.abort()

    def _fail(self, exc: Exception) -> None:
        if self._waiter is not None and not self._waiter.done():
            self._waiter.set_exception(exc)
        self._waiter = None


async def _connect(spec: LoadSpec) -> _Connection:
    loop = asyncio.get_running_loop()
    _, conn = await loop.create_connection(lambda: _Connection(loop), spec.host, spec.port)
    return conn


def _failure_kind(exc: BaseException) -> str:
    if isinstance(exc, TimeoutError):
        return "timeout"
    if isinstance(exc, ProtocolError):
        return "protocol"
    return "connection"


async def _slot(
    spec: LoadSpec,
    conn: _Connection | None,
    deadline: float,
    timeout: float,
    tally: _Tally,
    rng: random.Random,
) -> _Connection | None:
    """Send requests on one connection until ``deadline``; returns the open connection."""
    loop = asyncio.get_running_loop()
    requests, clock = spec.requests, time.perf_counter
    while clock() < deadline:
        if conn is None or conn.closed:
            try:
                conn = await _connect(spec)
            except OSError:
                tally.failures["connect"] += 1
                conn = None
                await asyncio.sleep(0.01)  # a refused connect fails at once: do not spin
                continue
        request = requests[rng.randrange(len(requests))]
        started = clock()
        timer = loop.call_later(timeout, conn.expire)
        try:
            response = await conn.send(request)
        except (OSError, TimeoutError, ProtocolError) as exc:
            tally.failures[_failure_kind(exc)] += 1
            conn.abort()
            conn = None
            continue
        finally:
            timer.cancel()
        elapsed = clock() - started
        tally.statuses[response.status] += 1
        if 200 <= response.status < 300:
            tally.latencies.append(elapsed)
        if not response.keep_alive:
            conn.abort()
            conn = None
    return conn


def _cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


async def _run(spec: LoadSpec, on_start: Callable[[], None]) -> tuple[dict[str, Any], _Tally]:
    rng = random.Random(spec.seed)
    rngs = [random.Random(rng.random()) for _ in range(spec.concurrency)]
    conns: list[_Connection | None] = []
    setup = _Tally()
    for _ in range(spec.concurrency):
        try:
            conns.append(await _connect(spec))
        except OSError:
            setup.failures["connect"] += 1
            conns.append(None)
    warm = _Tally()
    if spec.warmup_seconds > 0:
        deadline = time.perf_counter() + spec.warmup_seconds
        conns = list(
            await asyncio.gather(
                *(
                    _slot(spec, c, deadline, spec.warmup_timeout, warm, r)
                    for c, r in zip(conns, rngs, strict=True)
                )
            )
        )
    on_start()
    tally = _Tally(failures=setup.failures)
    cpu_before, started = _cpu(), time.perf_counter()
    deadline = started + spec.seconds
    conns = list(
        await asyncio.gather(
            *(
                _slot(spec, c, deadline, spec.timeout, tally, r)
                for c, r in zip(conns, rngs, strict=True)
            )
        )
    )
    seconds, cpu = time.perf_counter() - started, _cpu() - cpu_before
    for conn in conns:
        if conn is not None:
            conn.abort()
    result = summarise(tally, seconds, cpu)
    result["warmup"] = {"requests": warm.requests, "errors": warm.errors}
    return result, tally


def run_load(spec: LoadSpec, on_start: Callable[[], None] = lambda: None) -> dict[str, Any]:
    """Run the load in this process (the bench runs it in another: see ``main``)."""
    if spec.concurrency < 1 or spec.seconds <= 0 or not spec.requests:
        raise ValueError(
            f"need concurrency >= 1, seconds > 0 and requests, got {spec.concurrency}, "
            f"{spec.seconds}, {len(spec.requests)} requests"
        )
    return _event_loop_runner()(_run(spec, on_start))[0]


def _event_loop_runner() -> Callable[[Any], Any]:
    """uvloop's runner when it is installed (the server's choice too): about a third less
    client CPU per request than asyncio's loop, CPU the server then has (client and
    server share the machine's two cores)."""
    try:
        import uvloop
    except ImportError:
        return asyncio.run
    return uvloop.run  # type: ignore[no-any-return]


def main() -> int:
    spec = LoadSpec.from_json(sys.stdin.read())

    def started() -> None:
        print(START_LINE, flush=True)

    print(json.dumps(run_load(spec, started)), flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
