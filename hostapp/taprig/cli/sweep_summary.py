"""The closing lines of a sweep: what :func:`taprig.analysis.analyse_points` says of its points, in words.

The words are :mod:`taprig.analysis.wording`'s, the same sentences the handout and the dashboard show: every
number with its uncertainty, or the sentence that says why it is not there.
"""

from __future__ import annotations


def summary_lines(records, rig, plan) -> tuple[bool, list[str], list[str]]:
    """(ok, lines for stdout, problems for stderr) for the point ``records`` of a sweep by ``plan`` on ``rig``.

    ``ok`` is False when an angle sweep of a section gives no lift curve (too few usable points).
    """
    from taprig.analysis import ISO_MACHINED, analyse_points, wording
    from taprig.rig import RigKind

    lines: list[str] = []
    problems: list[str] = []
    ok = True
    if rig.kind is RigKind.AIRFOIL and plan.inner == "angle":
        groups = sorted({r.get("fan") for r in records if isinstance(r.get("fan"), (int, float))})
        for fan in groups or [None]:
            chosen = [r for r in records if fan is None or r.get("fan") == fan]
            prefix = f"fan {fan:.3g}: " if len(groups) > 1 else ""
            a = analyse_points(chosen, rig)
            if a.fit is None:
                problems.append(f"{prefix}no lift curve: {a.reasons.get('fit', 'too few points')}")
                ok = False
                continue
            lines.append("")
            lines += [prefix + line for line in wording.lift_lines(a)]
    elif rig.kind is RigKind.AIRFOIL and records:
        a = analyse_points(records, rig)
        if len(a.table):
            lines += ["", *wording.reynolds_lines(a)]
    elif rig.kind is RigKind.VENTURI:
        lines += ["", *wording.venturi_lines(analyse_points(records, rig), ISO_MACHINED)]
    return ok, lines, problems
