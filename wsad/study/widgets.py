"""Notebook widgets (ipywidgets): a timeline browser over a study's variants, and an
operating-point explorer that recomputes the alarm threshold and its results as the false-alarm
budget moves. Each keeps what it shows in ``.shown`` (the values drawn), so tests and users
can read the numbers behind the picture."""
from __future__ import annotations

import pandas as pd

from ..errors import WsadError


def _runs_of(source) -> dict:
    """{label: Run} from a Run, a {label: Run} mapping, or a Study (one seed per variant)."""
    from ..publish import Run

    if isinstance(source, Run):
        return {source.name: source}
    if isinstance(source, dict):
        return dict(source)
    if hasattr(source, "report"):
        return source.report()._one_per_variant(None)
    raise WsadError("give a Run, a {label: Run} mapping or a Study")


class TimelineBrowser:
    """Pick a camera and one of its test videos; see every variant's scores over the video, the
    ground truth, and each variant's alarms at its own operating point (x in seconds when the
    store has an fps)."""

    def __init__(self, source):
        import ipywidgets as w

        self.runs = _runs_of(source)
        first = next(iter(self.runs.values()))
        self.table = first.scores
        cams = sorted(self.table.group.unique())
        self.camera = w.Dropdown(options=cams, value=cams[0], description="camera")
        self.video = w.Dropdown(options=self.videos_of(cams[0]), description="video")
        self.out = w.Output()
        self.camera.observe(lambda _: self._camera_changed(), "value")
        self.video.observe(lambda _: self.draw(), "value")
        self.widget = w.VBox([w.HBox([self.camera, self.video]), self.out])
        self.shown: dict = {}
        self.draw()

    def videos_of(self, camera: str) -> list[str]:
        t = self.table
        return sorted(t[t.group == camera].video.unique())

    def _camera_changed(self) -> None:
        self.video.options = self.videos_of(self.camera.value)
        self.video.value = self.video.options[0]
        self.draw()

    def draw(self) -> None:
        import matplotlib.pyplot as plt
        from IPython.display import clear_output, display

        from ..evaluate.alarms import alarm_runs
        from ..evaluate.plots import timeline_figure
        from ..publish.budgets import run_rules

        video = self.video.value
        traces, alarms, truth, fps = {}, {}, None, None
        for name, run in self.runs.items():
            g = run.scores[run.scores.video == video].sort_values("frame")
            traces[name] = g.score.to_numpy()
            truth = (g.label.to_numpy() > 0).astype(int)
            fps = run.store.fps
            if run.threshold is not None and fps:
                alarms[name] = alarm_runs(traces[name] >= run.threshold, run_rules(run.summary, fps))
        threshold = next(iter(self.runs.values())).threshold if len(self.runs) == 1 else None
        self.shown = {"video": video, "camera": self.camera.value, "traces": traces, "alarms": alarms,
                      "threshold": threshold}
        fig = timeline_figure(traces, truth, f"{video} (camera {self.camera.value})", fps, threshold, alarms)
        with self.out:
            clear_output(wait=True)
            display(fig)
        plt.close(fig)

    def _ipython_display_(self) -> None:
        from IPython.display import display

        display(self.widget)


class OperatingPointExplorer:
    """A false-alarm budget slider over one run: the threshold that keeps the held-out normal
    training footage within the budget, and the test results at it (event recall, false alarms
    per hour, delay, the per-camera table), recomputed from the run's exported scores."""

    def __init__(self, run, budget: float | None = None):
        import ipywidgets as w

        from ..publish.budgets import BudgetPoint

        self.run = _runs_of(run)
        if len(self.run) != 1:
            raise WsadError("the operating-point explorer takes one run")
        self.run = next(iter(self.run.values()))
        self.point = BudgetPoint(self.run.folder)
        start = float(budget if budget is not None else self.run.summary["evaluation"]["budget"])
        self.budget = w.FloatLogSlider(value=start, base=10, min=-1, max=2.5, step=0.05,
                                       description="alarms/h", continuous_update=False)
        self.out = w.Output()
        self.budget.observe(lambda _: self.draw(), "value")
        self.widget = w.VBox([self.budget, self.out])
        self.shown: dict = {}
        self.draw()

    def draw(self) -> None:
        from IPython.display import HTML, clear_output, display

        metrics, cameras = self.point.at(float(self.budget.value))
        self.shown = {"budget": float(self.budget.value), **metrics, "cameras": cameras}
        text = (f"<b>budget {self.budget.value:.3g} false alarms per camera-hour</b> on "
                f"{self.point.hours:.2f} h of held-out normal footage: threshold "
                f"{metrics['alarm/threshold']:.4f}; on the test split event recall "
                f"{metrics['alarm/event_recall']:.3f}, {metrics['alarm/false_per_hour']:.2f} false alarms per "
                f"hour, median delay {metrics['alarm/delay_s']:.2f} s")
        with self.out:
            clear_output(wait=True)
            display(HTML(text))
            display(pd.DataFrame(cameras))

    def _ipython_display_(self) -> None:
        from IPython.display import display

        display(self.widget)
