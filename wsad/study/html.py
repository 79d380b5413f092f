"""The study report's notebook table."""
from __future__ import annotations

from html import escape

import pandas as pd

from ..report.tables import Report, _fmt


def _html_table(t: pd.DataFrame, rep: Report, metric: str) -> str:
    two = "diff_two_level_lo" in t.columns
    head = ["variant", "n", f"{metric} (mean ± sd)", "95% CI (seeds)", "Δ vs baseline [95% CI, seeds]", "p (Holm)"]
    head += ["Δ [95% CI, cameras and seeds]"] if two else []
    rows = []
    for _, r in t.iterrows():
        if r["variant"] == rep.baseline:
            diff, p = "baseline", ""
        else:
            diff = f"{r['diff']:+.3f} [{_fmt(r['diff_lo'])}, {_fmt(r['diff_hi'])}]"
            p = _fmt(r.get("p_holm"))
            if r.get("significant"):
                diff, p = f"<b>{diff}</b>", f"<b>{p}</b>"
        cells = [escape(str(r["variant"])), str(r["n"]), f"{_fmt(r['mean'])} ± {_fmt(r['sd'])}",
                 f"[{_fmt(r['lo'])}, {_fmt(r['hi'])}]", diff, p]
        if two:
            cells.append("" if r["variant"] == rep.baseline else
                         f"[{_fmt(r.get('diff_two_level_lo'))}, {_fmt(r.get('diff_two_level_hi'))}]")
        rows.append("<tr>" + "".join(f"<td style='text-align:left'>{c}</td>" for c in cells) + "</tr>")
    return ("<table><thead><tr>" + "".join(f"<th style='text-align:left'>{escape(h)}</th>" for h in head)
            + "</tr></thead><tbody>" + "".join(rows) + "</tbody></table>")
