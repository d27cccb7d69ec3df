"""summary.csv and groups.csv read the way a statistics user reads them: pandas.read_csv with
its defaults, then a typed read. pandas (like R's read.csv, whose type.convert takes `true` and
`false` as logicals) turns each flag column into booleans and each measure into numbers, with
no string parsing."""
import json
import math
import re
import subprocess

import pandas as pd
import pytest

from conftest import BIN, ROOT

# The columns a user's script relies on, written out here rather than taken from the code.
FLAGS = [
    "no_click", "double_click", "no_loading", "no_release", "clipped", "sync_mismatch",
    "low_snr", "frame_gaps", "frames_dropped_cells", "click_on_other_channel", "lossy_audio",
    "encoder_delay_unknown", "truncated_audio", "unfinalised_wav", "track_lost",
]
MEASURES = [
    "click_onset_s", "click_onset_sd_ms", "clicks", "ticks", "thumps",
    "loading_onset_s", "loading_onset_sd_ms", "loading_before_record", "loading_departure_s",
    "latch_release_s", "latch_release_sd_ms", "latch_release_video_s",
    "latch_release_video_sd_ms", "motion_peak_s", "motion_peak_sd_ms", "fast_phase_end_s",
    "fast_phase_end_sd_ms", "loading_ms", "loading_sd_ms", "release_ms", "release_sd_ms",
    "amplification_lossless", "efficiency", "amplification", "amplification_sd",
    "frequency_hz", "amplitude_ratio", "amplitude_ratio_sd", "damping_ratio",
    "sync_residual_ms", "sync_tolerance_ms", "click_peak_dbfs", "click_snr_db",
    "missing_frames", "error",
]
SUMMARY_HEADER = ["trial", "group", "status", "flags"] + [f"flag_{f}" for f in FLAGS] + MEASURES


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    out = tmp_path_factory.mktemp("campaign")
    p = subprocess.run(
        [BIN, "batch", "sample-audio/manifest.csv", "--out", str(out),
         "--rig", "calibration/demo-rig.json", "--quiet"],
        cwd=ROOT, capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    return out


def test_summary_header_is_the_documented_one(campaign):
    header = (campaign / "summary.csv").read_text().splitlines()[0].split(",")
    assert header == SUMMARY_HEADER


def test_summary_reads_typed_with_pandas_defaults(campaign):
    df = pd.read_csv(campaign / "summary.csv")
    assert len(df) == 14
    for f in FLAGS:
        assert df[f"flag_{f}"].dtype == bool, f
    # The boolean columns agree with the flags list, so a filter needs no string parsing.
    for _, row in df.iterrows():
        listed = set(row["flags"].split(";")) if isinstance(row["flags"], str) else set()
        assert {f for f in FLAGS if row[f"flag_{f}"]} == listed, row["trial"]
    assert df["flag_double_click"].sum() == 1
    for c in MEASURES:
        if c in ("error", "loading_before_record"):
            continue
        assert pd.api.types.is_numeric_dtype(df[c]), (c, df[c].dtype)
    typed = pd.read_csv(
        campaign / "summary.csv",
        dtype={"trial": "string", "group": "string", "status": "category",
               "loading_ms": "float64", "loading_sd_ms": "float64",
               "amplification": "float64", "amplification_sd": "float64",
               "clicks": "Int64", "thumps": "Int64", "missing_frames": "Int64",
               "loading_before_record": "boolean"})
    assert set(typed["status"].cat.categories) <= {"ok", "flagged", "error"}
    assert (typed["loading_sd_ms"].dropna() > 0).all()


def test_every_uncertainty_follows_one_naming_rule_in_table_and_record(campaign):
    rule = re.compile(r"^[a-z_]+_sd(_[a-z]+)?$")
    df = pd.read_csv(campaign / "summary.csv")
    sd_columns = [c for c in df.columns if "_sd" in c]
    assert sd_columns and all(rule.match(c) and not c.endswith("_ms_sd") for c in sd_columns)
    record = json.loads((campaign / "trials" / "ls2-mid-01.json").read_text())
    sd_fields = [k for k in record if "_sd" in k or "uncertainty" in k]
    assert all(rule.match(k) for k in sd_fields), sd_fields
    # The table carries the record's uncertainties, to the digits it writes (3 significant).
    row = df[df["trial"] == "ls2-mid-01"].iloc[0]
    for field in ["loading_sd_ms", "release_sd_ms", "latch_release_sd_ms", "motion_peak_sd_ms",
                  "amplification_sd", "loading_onset_sd_ms"]:
        assert math.isclose(row[field], record[field], rel_tol=5e-3), field


def test_no_minus_zero_and_no_float_noise_in_either_table(campaign):
    for name in ["summary.csv", "groups.csv"]:
        text = (campaign / name).read_text()
        assert not re.search(r"(^|,)-0(\.0*)?(,|$)", text, re.M), name
        assert not re.search(r"\d\.\d*(9{8,}|0{8,}[1-9])", text), name


def test_groups_long_form_reads_and_pivots(campaign):
    g = pd.read_csv(campaign / "groups.csv")
    assert list(g.columns) == ["group", "measure", "statistic", "value", "note"]
    assert g["value"].dtype == "float64"
    wide = g.pivot_table(index=["group", "measure"], columns="statistic", values="value")
    assert wide.loc[("(all)", "trials"), "count"] == 14
    assert wide.loc[("leaf-0.8mm", "trials"), "count"] == 5
    # Below five values there is no bootstrap interval: an empty value and its reason.
    small = g[(g["statistic"] == "ci95_low")]
    n = g[g["statistic"] == "n"].set_index(["group", "measure"])["value"]
    for _, row in small.iterrows():
        if n[(row["group"], row["measure"])] < 5:
            assert math.isnan(row["value"]) and "n < 5" in row["note"]
        else:
            assert not math.isnan(row["value"])
