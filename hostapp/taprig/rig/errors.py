"""The one error type a user sees for a bad rig or calibration file, and the unit-suffixed keys of those files.

A :class:`RigError` carries every problem found (not just the first), each as a :class:`RigIssue` with the key
path written the way a person would find it in the file (``taps[3].x_c``, ``sensors.tap.range_pa``).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Annotated, Any

from pydantic import AfterValidator, Field, ValidationError

from taprig.physics.units import Unit


@dataclass(frozen=True, slots=True)
class RigIssue:
    """One problem in a rig file: where (key path), what was found, and what was expected."""

    key: str
    message: str
    value: Any = None

    def __str__(self) -> str:
        found = "" if self.value is None else f" (got {self.value!r})"
        return f"{self.key or '<top level>'}: {self.message}{found}"


class RigError(Exception):
    """A rig (or calibration) file that cannot be used; ``str()`` lists every issue, one per line."""

    def __init__(self, source: str, issues: Sequence[RigIssue]):
        self.source = source
        self.issues = list(issues)
        lines = "\n".join(f"  {issue}" for issue in self.issues)
        count = len(self.issues)
        super().__init__(f"{source}: {count} problem{'s' if count != 1 else ''}\n{lines}")


class CrossCheckFailed(Exception):
    """Raised from inside model validation with the cross-check issues; turned into a RigError by the parser.

    It deliberately is not a ValueError, so pydantic lets it through instead of wrapping it.
    """

    def __init__(self, issues: Sequence[RigIssue]):
        super().__init__(f"{len(issues)} cross-check issue(s)")
        self.issues = list(issues)


def key_path(loc: Sequence[str | int]) -> str:
    """Format a pydantic location tuple as a key path: ``("taps", 3, "x_c")`` → ``taps[3].x_c``."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out


def issues_from_validation(exc: ValidationError, clean_loc: Callable[[tuple], tuple] = tuple) -> list[RigIssue]:
    """Turn pydantic's errors into issues; ``clean_loc`` may rewrite a location (e.g. drop a union tag)."""
    issues = []
    for err in exc.errors(include_url=False):
        loc = clean_loc(tuple(err["loc"]))
        message = str(err["msg"]).removeprefix("Value error, ")
        if err["type"] == "extra_forbidden":
            message = "unknown key (misspelt? see docs/rig-file.md for the keys of this table)"
        elif err["type"] == "missing":
            message = "required key is missing"
        elif err["type"] == "union_tag_invalid":
            ctx = err.get("ctx", {})
            loc = (*loc, str(ctx.get("discriminator", "kind")).strip("'"))
            message = f"unknown {loc[-1]} {ctx.get('tag')!r}; expected one of {ctx.get('expected_tags')}"
        value = err.get("input") if err["type"] not in ("missing", "model_type", "dict_type") else None
        if isinstance(value, dict):
            value = None  # a whole table is too much to echo; the key path says where it is
        issues.append(RigIssue(key_path(loc), message, value))
    return issues


# Unit-suffixed keys: the file value is checked in its own unit (so messages echo what the user wrote), then
# converted once to SI here with the factors of taprig.physics.units.
def _scaled(factor: float, offset: float = 0.0):
    return AfterValidator(lambda v: None if v is None else v * factor + offset)


Millimetres = Annotated[float, _scaled(Unit.MILLIMETRE.scale)]  # file: *_mm → m
SquareMillimetres = Annotated[float, _scaled(Unit.MILLIMETRE.scale**2)]  # file: *_mm2 → m²
Degrees = Annotated[float, _scaled(Unit.DEGREE.scale)]  # file: *_deg → rad
Celsius = Annotated[float, Field(gt=-Unit.CELSIUS.offset), _scaled(Unit.CELSIUS.scale, Unit.CELSIUS.offset)]  # *_c → K
