"""How a program finds a result in the record: by a key, never by its formatted label.

A label such as "orthophosphate-P, river_upstream" or "K, combined" is written for people and
may change with the wording; the key names what the result is (`kind`) and which sample or
point it belongs to (`id`), and stays the same.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

# "result": the method's result for one sample (id: the sample) or its single result (id: None);
# "K": the formation constant of one mixture or series point (id: the point);
# "combined K" and "log10 K": the constant combined over every point, on both scales (id: None);
# "standard addition": a sample's concentration by extrapolation of its own additions (id: the sample).
ResultKind = Literal["result", "K", "combined K", "log10 K", "standard addition"]


@dataclass(frozen=True)
class ResultKey:
    kind: ResultKind
    id: str | None = None
