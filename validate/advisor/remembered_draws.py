"""The random numbers the advisor's Monte Carlo checks share, drawn once.

Every check (the run's model, then each confirmed change) draws its trials from numpy's default
generator with one seed, source by source in a fixed order (common random numbers: a change is
compared with the run on the same draws, so the comparison is not lost in sampling noise). A
change of uncertainties scales a source's draws after they are drawn, so most of a change's
calls to the generator meet the stream in the state the run's check met it in, and ask it for the
same thing: they get the same numbers. `RememberedStreams` remembers what the first check's calls
drew, by the call and the generator's state before it, and gives a later check a copy of those
numbers and the state after them instead of drawing them again: the same numbers bit for bit,
since a generator's output is a function of its state and the call alone.
"""

from __future__ import annotations

from typing import Any

import numpy as np

MAX_REMEMBERED_BYTES = 64 * 2**20  # at the advisor's 50,000 trials the run's draws take about 25 MiB


class RememberedStreams:
    """Generators for `montecarlo.symmetric_intervals(stream=...)`: call with a seed. While
    `remembering`, what the generators draw is kept (up to MAX_REMEMBERED_BYTES); afterwards it
    is only read."""

    def __init__(self) -> None:
        self.memory: dict[tuple, tuple[np.ndarray, Any]] = {}
        self.remembering = True
        self.kept_bytes = 0
        self.calls = self.reused = 0  # what the generators were asked for, and what memory gave

    def __call__(self, seed) -> _Stream:
        return _Stream(np.random.default_rng(seed), self)


class _Stream:
    """A numpy Generator whose calls go through the memory of its `RememberedStreams`."""

    def __init__(self, rng: np.random.Generator, streams: RememberedStreams) -> None:
        self._rng, self._streams = rng, streams

    def __getattr__(self, name: str):
        method = getattr(self._rng, name)
        if not callable(method):
            return method

        def call(*args, **kwargs):
            streams, bits = self._streams, self._rng.bit_generator
            key = (name, args, tuple(sorted(kwargs.items())), repr(bits.state))
            streams.calls += 1
            known = streams.memory.get(key)
            if known is not None:
                values, after = known
                bits.state = after
                streams.reused += 1
                return values.copy()  # the caller scales its draws in place
            out = method(*args, **kwargs)
            if (streams.remembering and isinstance(out, np.ndarray)
                    and streams.kept_bytes + out.nbytes <= MAX_REMEMBERED_BYTES):
                streams.memory[key] = (out.copy(), bits.state)
                streams.kept_bytes += out.nbytes
            return out

        return call
