"""The order study speaks only where both arms learn, and corrects for its many tests."""
from __future__ import annotations

import numpy as np
import pandas as pd

from wsad.studies import effect_markdown, order_conclusion, order_effect


def _results(settings: dict[float, tuple[float, float]], seeds=5, sd=0.004) -> pd.DataFrame:
    rng = np.random.default_rng(0)
    rows = []
    for value, (seq, shf) in settings.items():
        for seed in range(seeds):
            base = rng.normal(0, 0.01)   # a seed effect shared by both arms: the pairing removes it
            rows.append({"knob": "rho", "value": value, "seed": seed, "order": "sequential",
                         "frame_auc": seq + base + rng.normal(0, sd)})
            rows.append({"knob": "rho", "value": value, "seed": seed, "order": "shuffled",
                         "frame_auc": shf + base + rng.normal(0, sd)})
    return pd.DataFrame(rows)


def test_an_effect_between_models_at_chance_is_not_reported():
    # at 0.97 both arms sit near chance yet differ clearly: not a finding about order
    eff = order_effect(_results({0.0: (0.78, 0.80), 0.8: (0.70, 0.70), 0.97: (0.50, 0.53)}))
    row = eff.set_index("value")
    assert not row.loc[0.97, "learns"] and not row.loc[0.97, "order_matters"] and np.isnan(row.loc[0.97, "p_holm"])
    assert row.loc[0.97, "p_t"] < 0.01                     # the raw test would have called it
    assert row.loc[0.0, "order_matters"] and not row.loc[0.8, "order_matters"]
    # Holm over the two tested settings (Holm 1979): the smaller p doubled, then monotone
    tested = row[row.learns].sort_values("p_t")
    assert tested.p_holm.iloc[0] == min(1.0, 2 * tested.p_t.iloc[0])
    assert tested.p_holm.iloc[1] == max(tested.p_holm.iloc[0], min(1.0, tested.p_t.iloc[1]))
    text = order_conclusion(eff)
    assert "rho=0.97 the model does not learn here" in text and "shuffled windows score higher" in text
    assert "not tested" in effect_markdown(eff)
