"""A running step's phases and its stop: the reporter, a long library call waited on with a
way out, and the overview and projection steps reporting their phases."""

from __future__ import annotations

import threading

import pytest
from sklearn.datasets import load_iris

from analysis.frames import table_from_frame
from analysis.overview import OverviewStep
from analysis.progress import Reporter, StepStopped, Stopper, stoppable_call
from analysis.projection import ProjectionStep


@pytest.fixture(scope="module")
def iris():
    """scikit-learn's iris data: 150 flowers, 4 measurements and the species."""
    frame = load_iris(as_frame=True).frame
    return table_from_frame(frame, name="iris.csv")


def test_a_stop_ends_the_wait_on_a_long_call_while_the_call_still_runs():
    release, finished = threading.Event(), threading.Event()

    def long_call():
        release.wait()
        finished.set()
        return 1

    stopper = Stopper()
    reporter = Reporter(stopper=stopper)
    reporter.phase("layout")
    stopper.request()
    with pytest.raises(StepStopped, match="stopped by request during layout"):
        stoppable_call(reporter, long_call)
    # the step ended while the library call had not: it finishes on its own thread later
    assert not finished.is_set()
    release.set()


def test_a_long_call_gives_its_value_or_its_error_whoever_listens():
    def fails():
        raise ValueError("bad cell")

    for reporter in (Reporter(), Reporter(lambda p: None, stopper=Stopper())):
        assert stoppable_call(reporter, sum, [1, 2, 3]) == 6
        with pytest.raises(ValueError, match="bad cell"):
            stoppable_call(reporter, fails)


def test_overview_reports_each_column_and_stops_when_asked(iris):
    seen = []
    result = OverviewStep().run(iris, progress=seen.append)
    columns = [p for p in seen if p.phase == "describing the columns"]
    # one report as the phase starts, then one per column
    assert [p.done for p in columns] == list(range(len(iris.columns) + 1))
    assert seen[-1].phase == "correlated pairs" and result.rows == 150

    stopper = Stopper()

    def stop_at_third(found):
        if found.done == 3:
            stopper.request()

    with pytest.raises(StepStopped, match="describing the columns"):
        OverviewStep().run(iris, progress=Reporter(stop_at_third, stopper=stopper))


@pytest.mark.parametrize("method, phases", [
    ("pca", ["reading the features", "PCA on 150 rows"]),
    ("umap", ["reading the features", "UMAP: nearest neighbours of 150 rows",
              "UMAP: layout of 150 rows"]),
])
def test_projection_reports_its_phases_and_gives_the_same_picture(iris, method, phases):
    seen = []
    step = ProjectionStep(method=method, seed=3)
    watched = step.run(iris, progress=seen.append)
    assert [p.phase for p in seen] == phases
    alone = step.run(iris)
    assert (watched.x == alone.x).all() and (watched.y == alone.y).all()


def test_projection_stops_in_its_layout(iris):
    stopper = Stopper()

    def stop_in_layout(found):
        if found.phase.startswith("t-SNE"):
            stopper.request()

    with pytest.raises(StepStopped, match="t-SNE on 150 rows"):
        ProjectionStep(method="tsne").run(iris, progress=Reporter(stop_in_layout,
                                                                   stopper=stopper))
