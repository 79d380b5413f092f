"""What the commands print at the end: the lead metrics with their intervals, then the
operating point (names and order from the metric catalogue)."""
from __future__ import annotations


def metric_lines(m: dict, budget: float) -> str:
    from ..evaluate.catalogue import CATALOGUE, console

    def shown(name: str) -> str:
        text = f"{name} {m[name]:.3f}"
        return text + (f" [{m[name + '_lo']:.3f}, {m[name + '_hi']:.3f}]" if f"{name}_lo" in m else "")

    names = [n for n in console() if n in m]
    lines = [" · ".join(shown(n) for n in names if CATALOGUE[n].stage != "operating point")
             or "no test metric (see the warnings)"]
    if "alarm/threshold" in m:
        nan = float("nan")
        lines.append(f"  operating point at {budget:g} false alarm(s) per camera-hour on "
                     f"{m.get('alarm/normal_hours', nan):.2f} h of held-out normal footage: threshold "
                     f"{m['alarm/threshold']:.3f}, event recall {m.get('alarm/event_recall', nan):.3f}, "
                     f"{m.get('alarm/false_per_hour', nan):.2f} false alarms per hour of test footage")
    return "\n".join(lines)
