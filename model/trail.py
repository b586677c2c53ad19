"""The "why" trail: how a dose figure was made, step by step, serialisable to JSON.

Every figure beamaudit reconstructs (a DAP, an incident air kerma, an entrance dose) keeps the
ordered steps that produced it: which inputs it read, which equation it applied and from which
publication, which defaults it fell back on. A dashboard shows the trail as "how this number
was made"; an auditor can re-do each step by hand.

A :class:`TrailStep` is one such step; a :class:`WhyTrail` is an ordered, append-only sequence of
them. Steps marked ``assumed`` used a default or an assumption instead of a recorded value; their
``note`` says which, and :attr:`WhyTrail.assumptions` lists those notes for a short summary.

Values are kept JSON-ready: numbers become plain ``float``/``int``, tuples become lists, and a
non-finite number is refused, because JSON cannot carry it and a NaN in an audit trail hides an
error.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any, TypeAlias

import numpy as np

from beamaudit.model.errors import ModelError

__all__ = ["TrailStep", "WhyTrail"]

JsonValue: TypeAlias = bool | int | float | str | list["JsonValue"] | dict[str, "JsonValue"] | None


def _jsonable(value: Any, *, where: str) -> JsonValue:
    """Return ``value`` as plain JSON types; refuse what JSON cannot carry faithfully."""
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ModelError(f"why trail: {where} is {value}, which cannot be recorded")
        return value
    if isinstance(value, np.ndarray):
        return [_jsonable(v, where=where) for v in value.tolist()]
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v, where=f"{where}.{k}") for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v, where=where) for v in value]
    raise ModelError(f"why trail: {where} has type {type(value).__name__}, not JSON-ready")


@dataclass(frozen=True, slots=True)
class TrailStep:
    """One step of a why trail.

    Parameters
    ----------
    quantity : str
        Name of what this step produced, with its unit in the name where it has one
        (``"fsd_mm"``, ``"incident_air_kerma_mgy"``, ``"backscatter_factor"``).
    value : float, int, str or None
        The value produced (``None`` when the step only records a decision).
    unit : str
        Unit of ``value`` in plain text (``"mm"``, ``"mGy"``, ``"Gy·cm²"``, ``"1"``).
    equation : str
        The rule or equation applied, in plain text (``"K_i = Y(1 m) · P_It · (1 m / d)²"``),
        or ``"recorded"`` when the value was read as given.
    source : str
        Where the equation or value comes from: a publication, a standard, a DICOM attribute,
        or a named default of this package.
    inputs : mapping of str to value
        The inputs the step read, by name (names carry units).
    assumed : bool
        True when the step used a default or an assumption rather than a recorded value.
    note : str or None
        A sentence for the reader; required when ``assumed`` is true (it says what was assumed).
    """

    quantity: str
    value: JsonValue
    unit: str
    equation: str
    source: str
    inputs: Mapping[str, JsonValue] = field(default_factory=dict)
    assumed: bool = False
    note: str | None = None

    def __post_init__(self) -> None:
        if not self.quantity:
            raise ModelError("why trail: a step needs a quantity name")
        if self.assumed and not self.note:
            raise ModelError(f"why trail: assumed step {self.quantity!r} needs a note saying what")
        object.__setattr__(self, "value", _jsonable(self.value, where=self.quantity))
        inputs = _jsonable(dict(self.inputs), where=f"{self.quantity}.inputs")
        object.__setattr__(self, "inputs", inputs)

    def as_dict(self) -> dict[str, JsonValue]:
        """The step as a JSON-ready dict (keys as the field names)."""
        return {
            "quantity": self.quantity,
            "value": self.value,
            "unit": self.unit,
            "equation": self.equation,
            "source": self.source,
            "inputs": dict(self.inputs),
            "assumed": self.assumed,
            "note": self.note,
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> TrailStep:
        """Rebuild a step from :meth:`as_dict` output."""
        try:
            return cls(
                quantity=data["quantity"],
                value=data["value"],
                unit=data["unit"],
                equation=data["equation"],
                source=data["source"],
                inputs=data.get("inputs") or {},
                assumed=bool(data.get("assumed", False)),
                note=data.get("note"),
            )
        except KeyError as exc:
            raise ModelError(f"why trail: step is missing the key {exc.args[0]!r}") from exc


class WhyTrail:
    """An ordered, append-only list of :class:`TrailStep`.

    Examples
    --------
    >>> trail = WhyTrail()
    >>> _ = trail.add("sid_mm", 1000.0, "mm", equation="recorded", source="(0018,1110)")
    >>> trail.steps[0].value
    1000.0
    >>> trail.assumptions
    []
    """

    __slots__ = ("_steps",)

    def __init__(self, steps: Iterable[TrailStep] = ()) -> None:
        self._steps: list[TrailStep] = list(steps)

    def add(
        self,
        quantity: str,
        value: Any,
        unit: str,
        *,
        equation: str,
        source: str,
        inputs: Mapping[str, Any] | None = None,
        assumed: bool = False,
        note: str | None = None,
    ) -> TrailStep:
        """Append one step and return it (arguments as for :class:`TrailStep`)."""
        step = TrailStep(
            quantity=quantity,
            value=value,
            unit=unit,
            equation=equation,
            source=source,
            inputs=dict(inputs or {}),
            assumed=assumed,
            note=note,
        )
        self._steps.append(step)
        return step

    def extend(self, other: Iterable[TrailStep]) -> None:
        """Append the steps of ``other`` (another trail or any iterable of steps), in order."""
        self._steps.extend(other)

    def merge(self, other: Iterable[TrailStep]) -> None:
        """Append the steps of ``other`` that this trail does not hold yet, in order.

        For joining trails that share steps (the SID step of a distance and of a field trail).
        """
        for step in other:
            if step not in self._steps:
                self._steps.append(step)

    def copy(self) -> WhyTrail:
        """A new trail with the same steps (steps are immutable, so this is safe to extend)."""
        return WhyTrail(self._steps)

    @property
    def steps(self) -> tuple[TrailStep, ...]:
        """The steps, in the order they were taken."""
        return tuple(self._steps)

    @property
    def assumptions(self) -> list[str]:
        """The notes of the assumed steps, in order, each once."""
        seen: dict[str, None] = {}
        for step in self._steps:
            if step.assumed and step.note:
                seen.setdefault(step.note, None)
        return list(seen)

    def as_list(self) -> list[dict[str, JsonValue]]:
        """The steps as JSON-ready dicts."""
        return [step.as_dict() for step in self._steps]

    def to_json(self, *, indent: int | None = None) -> str:
        """The trail as a JSON array of step objects."""
        return json.dumps(self.as_list(), indent=indent, ensure_ascii=False, allow_nan=False)

    @classmethod
    def from_json(cls, text: str) -> WhyTrail:
        """Rebuild a trail from :meth:`to_json` output."""
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ModelError(f"why trail: not valid JSON ({exc.msg})") from exc
        if not isinstance(data, list):
            raise ModelError("why trail: the JSON must be an array of steps")
        return cls(TrailStep.from_dict(item) for item in data)

    def __iter__(self) -> Iterator[TrailStep]:
        return iter(self._steps)

    def __len__(self) -> int:
        return len(self._steps)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, WhyTrail):
            return NotImplemented
        return self._steps == other._steps

    def __repr__(self) -> str:
        return f"WhyTrail({len(self._steps)} steps)"
