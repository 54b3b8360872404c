"""Resource profiles as short text for the ``check`` report: two lines per resource.

The first line names the resource, its bounds and whether the plan keeps to
them; the second gives start -> peak / low -> end and a strip drawn in plain
ASCII, one column per point (or per run of points when there are many), so a
dip or a climb shows at a glance within 80 columns::

    (charge carrier-7) battery reserve [floor 6 kWh]: crosses its floor after step 6
      20 -> peak 20, low 3 -> 12 kWh  |^~-._!!._-~|  steps 0..10

Strip heights, bottom to top: ``_ . - ~ ^``, scaled over the range the values
and the bounds span together; ``!`` marks a column where a bound is crossed.
"""

from __future__ import annotations

from plansieve.critics.verdict import LimitCrossed, ResourceProfile, Verdict

WIDTH = 80
STRIP_MAX = 32
STRIP_MIN = 8
LEVELS = "_.-~^"
CROSSED = "!"


def render_profiles(verdict: Verdict, width: int = WIDTH) -> list[str]:
    """Two lines per resource profile in ``verdict``; no lines when it has none."""
    out: list[str] = []
    for p in verdict.profiles:
        crossings = [f for f in verdict.findings
                     if isinstance(f, LimitCrossed) and f.resource == p.resource]
        out.extend(_profile_lines(p, crossings, width))
    return out


def _num(x: float) -> str:
    text = f"{x:.6g}"
    return "0" if text == "-0" else text


def _unit(p: ResourceProfile) -> str:
    return f" {p.unit}" if p.unit else ""


def _bounds(p: ResourceProfile) -> str:
    u = _unit(p)
    if p.floor is not None and p.ceiling is not None:
        return f"floor {_num(p.floor)}, ceiling {_num(p.ceiling)}{u}"
    if p.floor is not None:
        return f"floor {_num(p.floor)}{u}"
    if p.ceiling is not None:
        return f"ceiling {_num(p.ceiling)}{u}"
    return "no bounds"


def _when(f: LimitCrossed) -> str:
    if f.step is None and not f.time:
        return "at the start"
    if f.time is not None:
        return f"at time {_num(f.time)}"
    return f"after step {f.step}"


def _status(crossings: list[LimitCrossed]) -> str:
    if not crossings:
        return "within bounds"
    return "crosses " + " and ".join(f"its {f.bound} {_when(f)}" for f in crossings)


def _clip(text: str, width: int) -> str:
    return text if len(text) <= width else text[:width - 3] + "..."


def _profile_lines(p: ResourceProfile, crossings: list[LimitCrossed], width: int) -> list[str]:
    label = f" {p.label}" if p.label else ""
    head = _clip(f"  {p.resource}{label} [{_bounds(p)}]: {_status(crossings)}", width)
    numbers = (f"    {_num(p.initial)} -> peak {_num(p.peak)}, low {_num(p.low)} -> "
               f"{_num(p.final)}{_unit(p)}")
    axis = _axis(p)
    room = width - len(numbers) - len(axis) - 6  # two spaces, two bars, two spaces
    strip_width = max(STRIP_MIN, min(STRIP_MAX, len(p.points), room))
    strict = {f.bound for f in crossings if f.strict}
    line = f"{numbers}  |{strip(p, strip_width, strict)}|  {axis}"
    return [head, _clip(line, width)]


def _axis(p: ResourceProfile) -> str:
    times = [pt.time for pt in p.points if pt.time is not None]
    if times:
        return f"t {_num(min(times))}..{_num(max(times))}"
    return f"steps 0..{len(p.points) - 1}"


def _out(v: float, p: ResourceProfile, strict: set[str]) -> bool:
    if p.floor is not None and (v < p.floor or "floor" in strict and v == p.floor):
        return True
    return p.ceiling is not None and (v > p.ceiling or "ceiling" in strict and v == p.ceiling)


def strip(p: ResourceProfile, columns: int, strict: frozenset[str] | set[str] = frozenset()) -> str:
    """The profile drawn in ``columns`` characters (fewer when it has fewer points).

    Each column stands for a run of consecutive points and shows the one that
    matters most there: the lowest when only a floor is set, the highest when
    only a ceiling is, the one nearer its bound when both are, else the last.
    """
    values = [pt.value for pt in p.points]
    n = len(values)
    if n == 0:
        return ""
    columns = max(1, min(columns, n))
    lo = min([p.low] + ([p.floor] if p.floor is not None else []))
    hi = max([p.peak] + ([p.ceiling] if p.ceiling is not None else []))
    out = []
    for c in range(columns):
        run = values[c * n // columns:(c + 1) * n // columns]
        if any(_out(v, p, strict) for v in run):
            out.append(CROSSED)
            continue
        out.append(_level(_pick(run, p), lo, hi))
    return "".join(out)


def _pick(run: list[float], p: ResourceProfile) -> float:
    low, high = min(run), max(run)
    if p.floor is not None and p.ceiling is not None:
        return low if low - p.floor <= p.ceiling - high else high
    if p.floor is not None:
        return low
    if p.ceiling is not None:
        return high
    return run[-1]


def _level(v: float, lo: float, hi: float) -> str:
    if hi <= lo:
        return LEVELS[len(LEVELS) // 2]
    i = round((v - lo) / (hi - lo) * (len(LEVELS) - 1))
    return LEVELS[min(len(LEVELS) - 1, max(0, i))]
