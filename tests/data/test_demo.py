"""The demo scenario. All of it is invented data: these are checks that the generator does what
its documentation promises (determinism, layout, the designated correlations and their break),
not claims about any real system.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from benchkit.data import DataError, labels_to_events, make_demo
from benchkit.data.demo import INCIDENT_KINDS, MIN_GAP

# Bounds stated for the invented scenario (checked on seeds 0-2, default sizes):
# every designated pair keeps a Pearson correlation >= 0.75 in every one-day (288-step) window
# that holds no incident; over a correlation-break incident the broken KPI's correlation with
# its partner is <= 0.0 (it replays the node's state from 8-16 hours earlier).
DAY = 288
NORMAL_BOUND = 0.75
BREAK_BOUND = 0.0


@pytest.fixture(scope="module")
def demos():
    return [make_demo(seed=s) for s in range(3)]


def test_same_seed_same_bits_other_seed_other_data():
    a, b, c = make_demo(seed=11), make_demo(seed=11), make_demo(seed=12)
    for ea, eb in zip(a.entities, b.entities, strict=True):
        assert ea.train.tobytes() == eb.train.tobytes()
        assert ea.test.tobytes() == eb.test.tobytes()
        assert ea.labels.tobytes() == eb.labels.tobytes()
    assert a.notes == b.notes
    assert a.fingerprint() == b.fingerprint() != c.fingerprint()


def test_default_sizes_and_layout(demos):
    ds = demos[0]
    assert len(ds.entities) == 3
    for e in ds.entities:
        assert e.train.shape == (3000, 16) and e.test.shape == (2500, 16)
        assert e.labels.shape == (2500,) and e.labels.dtype == np.int8
        assert len(e.channels) == 16 and e.train_labels is None
        assert np.isfinite(e.train).all() and np.isfinite(e.test).all()


def test_every_kind_in_every_node_and_labels_match_incidents(demos):
    for ds in demos:
        for e in ds.entities:
            incidents = ds.notes["incidents"][e.name]
            assert {kind for kind, _, _ in incidents} == set(INCIDENT_KINDS)
            assert len(incidents) >= 6
            spans = np.array([(s, t) for _, s, t in incidents])
            # labels are exactly the union of the inclusive incident intervals
            np.testing.assert_array_equal(labels_to_events(e.labels), spans)
            gaps = spans[1:, 0] - spans[:-1, 1] - 1
            assert (gaps >= MIN_GAP).all() and spans[0, 0] >= MIN_GAP


def test_sizes_and_incident_counts_are_configurable():
    ds = make_demo(n_entities=2, n_channels=20, n_train=700, n_test=900, incidents=["drift"] * 3)
    assert [e.name for e in ds.entities] == ["pay-gw-01", "pay-gw-02"]
    assert ds.entities[0].train.shape == (700, 20) and ds.entities[0].test.shape == (900, 20)
    assert [k for k, _, _ in ds.notes["incidents"]["pay-gw-02"]] == ["drift"] * 3
    quiet = make_demo(n_train=600, n_test=300, incidents={})
    assert all(e.labels.sum() == 0 for e in quiet.entities)


@pytest.mark.parametrize(
    ("options", "message"),
    [
        ({"n_channels": 3}, "n_channels must be an integer in [4, 20], got 3"),
        ({"n_train": 100}, "n_train must be an integer in [576"),
        ({"seed": -1}, "seed must be an integer"),
        ({"n_entities": 2.5}, "n_entities must be an integer"),
        ({"incidents": {"meteor": 1}}, "unknown kind 'meteor'"),
        ({"incidents": {"spike": -2}}, "incidents.spike must be an integer"),
        ({"incidents": 3}, "incidents must be a table of counts or a list of kinds"),
        ({"incidents": [["spike"]]}, "unknown kind \"['spike']\""),
        ({"n_test": 400}, "n_test=400 is too short for 7 incidents"),
    ],
)
def test_bad_demo_options_raise_data_error(options, message):
    with pytest.raises(DataError, match="^demo: option") as info:
        make_demo(**options)
    assert message in str(info.value)


def _rolling_corr(x: np.ndarray, y: np.ndarray, window: int) -> np.ndarray:
    # reference: pandas Series.rolling(window).corr (Pearson correlation)
    return pd.Series(x).rolling(window).corr(pd.Series(y)).to_numpy()


def test_designated_pairs_stay_correlated_in_normal_days(demos):
    for ds in demos:
        assert len(ds.notes["pairs"]) == 4
        for e in ds.entities:
            series = np.vstack([e.train, e.test])
            flags = np.concatenate([np.zeros(e.train.shape[0]), e.labels])
            clean = pd.Series(flags).rolling(DAY).max().to_numpy() == 0
            assert clean.sum() > 2000  # most days are normal
            for a, b in ds.notes["pairs"]:
                r = _rolling_corr(
                    series[:, e.channels.index(a)], series[:, e.channels.index(b)], DAY
                )
                assert np.nanmin(r[clean]) >= NORMAL_BOUND, (e.name, a, b)


def test_correlation_break_decouples_inside_the_normal_range(demos):
    checked = 0
    for ds in demos:
        for e in ds.entities:
            events = zip(
                ds.notes["incidents"][e.name], ds.notes["incident_channels"][e.name], strict=True
            )
            for (kind, start, end), touched in events:
                if kind != "correlation-break":
                    continue
                (name,) = touched
                c = e.channels.index(name)
                window = e.test[start : end + 1]
                assert window[:, c].min() >= e.train[:, c].min()
                assert window[:, c].max() <= e.train[:, c].max()
                for a, b in ds.notes["pairs"]:
                    if name in (a, b):
                        x = window[:, e.channels.index(a)]
                        y = window[:, e.channels.index(b)]
                        # reference: numpy.corrcoef (Pearson)
                        assert np.corrcoef(x, y)[0, 1] <= BREAK_BOUND
                        checked += 1
    assert checked >= 9


def test_flat_line_holds_the_value_before_the_incident(demos):
    ds = demos[0]
    for e in ds.entities:
        events = zip(
            ds.notes["incidents"][e.name], ds.notes["incident_channels"][e.name], strict=True
        )
        for (kind, start, end), touched in events:
            if kind == "flat-line":
                cols = [e.channels.index(n) for n in touched]
                stuck = e.test[start - 1 : end + 1, cols]
                assert (stuck == stuck[0]).all()


def test_train_part_has_daily_seasonality(demos):
    # sanity check on invented data: request rate autocorrelation at one day beats half a day
    x = demos[0].entities[0].train[:, 0]
    x = x - x.mean()
    lag = lambda k: float(np.dot(x[:-k], x[k:]) / np.dot(x, x))  # noqa: E731
    assert lag(DAY) > 0.5 > lag(DAY // 2)
