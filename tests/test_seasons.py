"""Season selection, winter labels and blocks (`westerlies.seasons`)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr

from westerlies.errors import ConfigError, InputError, InputWarning
from westerlies.seasons import block_ids, blocks, season_months, select_season

CALENDARS = ["standard", "proleptic_gregorian", "noleap", "all_leap", "360_day"]


def _daily(start: str, end: str, calendar: str, members: int = 1) -> xr.DataArray:
    """A daily (member, time) series whose value is the member number plus the day count."""
    time = xr.date_range(start, end, freq="D", calendar=calendar, use_cftime=calendar != "standard")
    values = np.arange(members)[:, None] * 1000.0 + np.arange(time.size)[None, :]
    return xr.DataArray(
        values,
        dims=("member", "time"),
        coords={"member": np.arange(members), "time": time},
        name="x",
    )


def _quiet_select(obj, season):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        return select_season(obj, season)


# Days per season from the calendar definitions (CF Conventions section 4.4.1): 360_day has
# 30-day months; noleap never has 29 February; all_leap always has it; standard and
# proleptic_gregorian (identical after 1582) have it in 2004 only among the years used here.
DJF_DAYS = {  # winters 2003, 2004, 2005
    "standard": [90, 91, 90],
    "proleptic_gregorian": [90, 91, 90],
    "noleap": [90, 90, 90],
    "all_leap": [91, 91, 91],
    "360_day": [90, 90, 90],
}
NDJFM_DAYS = {
    "standard": [151, 152, 151],
    "proleptic_gregorian": [151, 152, 151],
    "noleap": [151, 151, 151],
    "all_leap": [152, 152, 152],
    "360_day": [150, 150, 150],
}
JJA_DAYS = {  # summers 2003, 2004
    "standard": [92, 92],
    "proleptic_gregorian": [92, 92],
    "noleap": [92, 92],
    "all_leap": [92, 92],
    "360_day": [90, 90],
}


@pytest.mark.parametrize("calendar", CALENDARS)
def test_winter_labels_in_every_calendar(calendar):
    da = _daily("2002-09-01", "2005-05-30", calendar)
    for season, days in (("DJF", DJF_DAYS), ("NDJFM", NDJFM_DAYS)):
        out = select_season(da, season)
        labels = out["season_year"].values
        # Convention (DESIGN.md): a winter is labelled by the year of its January.
        month, year = out["time"].dt.month.values, out["time"].dt.year.values
        np.testing.assert_array_equal(labels, year + (month >= 11))
        assert set(month) == set(season_months(season))
        uniq, counts = np.unique(labels, return_counts=True)
        np.testing.assert_array_equal(uniq, [2003, 2004, 2005])
        np.testing.assert_array_equal(counts, days[calendar])
        assert out.attrs["incomplete_seasons"] == []


@pytest.mark.parametrize("calendar", CALENDARS)
def test_summer_labels_in_every_calendar(calendar):
    da = _daily("2002-09-01", "2005-05-30", calendar)
    out = select_season(da, "JJA")
    uniq, counts = np.unique(out["season_year"].values, return_counts=True)
    np.testing.assert_array_equal(uniq, [2003, 2004])
    np.testing.assert_array_equal(counts, JJA_DAYS[calendar])
    np.testing.assert_array_equal(out["season_year"].values, out["time"].dt.year.values)


@pytest.mark.parametrize("calendar", ["standard", "360_day"])
def test_season_cut_short_is_kept_and_reported(calendar):
    # A run that starts on 15 December: winter 2001 has 17 + 31 + 28 days (standard) or
    # 16 + 30 + 30 (360_day), and is kept with a warning; winter 2002 is complete.
    da = _daily("2000-12-15", "2002-03-30", calendar)
    with pytest.warns(InputWarning, match="2001"):
        out = select_season(da, "DJF")
    uniq, counts = np.unique(out["season_year"].values, return_counts=True)
    np.testing.assert_array_equal(uniq, [2001, 2002])
    assert counts[0] == 76
    assert out.attrs["incomplete_seasons"] == [2001]
    assert out.attrs["season"] == "DJF"


def test_season_ending_early_is_reported():
    da = _daily("2000-12-01", "2001-02-10", "noleap")
    with pytest.warns(InputWarning):
        out = select_season(da, "DJF")
    assert out.attrs["incomplete_seasons"] == [2001]


def test_eofs_sample_winters_are_labelled_from_1948(eofs_sample_path):
    # Source: NCEP/NCAR reanalysis DJF means (Kalnay et al. 1996) in eofs' hgt_djf.nc, one
    # value per winter dated mid-January 1948..2012: winters 1948..2012 by the January rule.
    from westerlies.data import open_dataset

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", InputWarning)
        ds = open_dataset(eofs_sample_path)
    out = select_season(ds, "DJF")
    np.testing.assert_array_equal(out["season_year"].values, np.arange(1948, 2013))
    table = blocks(out)
    assert len(table) == 65
    np.testing.assert_array_equal(table["n_times"].values, np.ones(65))


def test_monthly_data_labels():
    time = xr.date_range("2000-01-01", periods=36, freq="MS", calendar="noleap", use_cftime=True)
    da = xr.DataArray(
        np.arange(36.0)[None], dims=("member", "time"), coords={"member": [0], "time": time}
    )
    out = _quiet_select(da, "DJF")
    # Jan/Feb 2000 (winter 2000, cut short: no December 1999), then winters 2001, 2002 complete
    # and December 2002 alone (winter 2003).
    np.testing.assert_array_equal(
        out["season_year"].values, [2000, 2000, 2001, 2001, 2001, 2002, 2002, 2002, 2003]
    )
    assert out.attrs["incomplete_seasons"] == [2000, 2003]


@pytest.mark.parametrize(
    ("season", "months"),
    [
        ("DJF", (12, 1, 2)),
        ("NDJFM", (11, 12, 1, 2, 3)),
        ("JJA", (6, 7, 8)),
        ("jja", (6, 7, 8)),
        ("SON", (9, 10, 11)),
        ([12, 1, 2], (12, 1, 2)),
    ],
)
def test_season_months(season, months):
    assert season_months(season) == months


@pytest.mark.parametrize("season", ["DJX", "JFD", "", "DJFD", [12, 2]])
def test_unknown_season_initials_raise(season):
    with pytest.raises(ConfigError) as info:
        season_months(season)
    assert issubclass(ConfigError, InputError)
    assert "season" in str(info.value) and "Fix" in str(info.value)


def test_ambiguous_initials_raise():
    # "J" could be January, June or July
    with pytest.raises(ConfigError, match=r"(?i)one run"):
        season_months("J")


# --- blocks ----------------------------------------------------------------------------------


@pytest.mark.parametrize("calendar", ["standard", "360_day"])
def test_block_count_is_members_times_seasons(calendar):
    end = "2005-02-30" if calendar == "360_day" else "2005-02-28"
    da = _daily("2002-12-01", end, calendar, members=4)
    out = select_season(da, "DJF")
    ids = block_ids(out)
    assert ids.dims == ("member", "time")
    n_blocks = 4 * 3  # members x winters
    np.testing.assert_array_equal(np.unique(ids.values), np.arange(n_blocks))
    # each block is one member in one winter, and each (member, winter) pair is one block
    pairs = {
        (m, int(y)): set(ids.values[m, out["season_year"].values == y])
        for m in range(4)
        for y in np.unique(out["season_year"].values)
    }
    assert all(len(v) == 1 for v in pairs.values())
    assert len({next(iter(v)) for v in pairs.values()}) == n_blocks
    table = blocks(out)
    assert len(table) == n_blocks
    assert table["n_times"].sum() == out.sizes["time"] * 4
    assert sorted(set(table["member"])) == [0, 1, 2, 3]


def test_without_season_each_member_is_one_block():
    da = _daily("2002-12-01", "2003-02-28", "360_day", members=3)
    ids = block_ids(da)
    for m in range(3):
        assert set(ids.values[m]) == {m}
    assert len(blocks(da)) == 3


def test_block_ids_on_dataset():
    da = _daily("2002-11-01", "2004-03-31", "noleap", members=2)
    ds = select_season(da.to_dataset(), "NDJFM")
    assert int(block_ids(ds).max()) + 1 == 2 * 2
