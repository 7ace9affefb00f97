"""`screenweave agree` through the CLI, on a tiny study folder built in tmp_path."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from pipeline.cli import app
from pipeline.errors import EXIT_INPUT

# Same hand-made codes as test_session.py: ann and bea code p01/s1 (20 s).
#            second: 01234567890123456789
A_ATTENDED = "tttttppppp..ttttpptt"
A_IN_VIEW = "mmmmmmmmmm..ttttmmmm"
B_ATTENDED = "ttttpppppp.tttttpp??"
B_IN_VIEW = "mmmmmmmmmm.tttttpp??"
CODES = {"t": "tv", "p": "phone", ".": ""}
VIEW = {"m": "phone;tv", "t": "tv", "p": "phone", ".": ""}


def log_rows(pid: str, sid: str, coder: str, attended: str, in_view: str) -> list[dict]:
    return [{"participant_id": pid, "session_id": sid, "second": i,
             "in_view": VIEW[in_view[i]], "attended": CODES[c], "coder": coder}
            for i, c in enumerate(attended) if c != "?"]


def make_study(root: Path, *, second_coder: bool = True, toml: str | None = None) -> Path:
    root.mkdir(parents=True, exist_ok=True)
    pd.DataFrame({"participant_id": ["p01", "p02"], "cohort": ["a", "b"]}).to_csv(
        root / "roster.csv", index=False)
    pd.DataFrame({
        "participant_id": ["p01", "p02"], "session_id": ["s1", "s1"],
        "start": ["2024-03-01T19:00:00+00:00", "2024-03-02T19:00:00+00:00"],
        "end": ["2024-03-01T19:00:20+00:00", "2024-03-02T19:00:20+00:00"],
    }).to_csv(root / "sessions.csv", index=False)
    rows = log_rows("p01", "s1", "ann", A_ATTENDED, A_IN_VIEW)
    rows += log_rows("p02", "s1", "ann", A_ATTENDED, A_IN_VIEW)  # p02: one coder only
    if second_coder:
        rows += log_rows("p01", "s1", "bea", B_ATTENDED, B_IN_VIEW)
    pd.DataFrame(rows).to_csv(root / "media_log.csv", index=False)
    if toml is not None:
        (root / "study.toml").write_text(toml, encoding="utf-8")
    return root


def test_agree_help_names_the_outputs():
    result = CliRunner().invoke(app, ["agree", "--help"])
    assert result.exit_code == 0
    assert "--out" in result.output and "--tolerance" in result.output
    assert "sessions.csv" in result.output


def test_agree_writes_the_tables_and_prints_a_summary(tmp_path):
    study = make_study(tmp_path / "study")
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["agree", str(study), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "1 of 2 sessions coded by two or more coders" in result.output
    assert "almost perfect" in result.output

    sessions = pd.read_csv(out / "agreement" / "sessions.csv")
    # CONTRACT §3 columns, in this order among the others
    contract = ["participant_id", "session_id", "coder_a", "coder_b", "seconds_compared",
                "agreement_attended", "kappa_attended", "kappa_state", "switches_a",
                "switches_b", "switch_precision", "switch_recall", "switch_f1"]
    assert [c for c in sessions.columns if c in contract] == contract
    assert "kappa_attended_band" in sessions.columns
    (row,) = sessions.to_dict("records")
    assert (row["participant_id"], row["coder_a"], row["coder_b"]) == ("p01", "ann", "bea")
    assert row["seconds_compared"] == 18
    # worked out by hand in test_session.py (Cohen 1960)
    assert row["kappa_attended"] == pytest.approx(149 / 185)
    assert row["kappa_state"] == pytest.approx(120 / 174)
    assert (row["switches_a"], row["switches_b"], row["switch_f1"]) == (3, 3, 1.0)

    confusion = pd.read_csv(out / "agreement" / "confusion.csv", keep_default_na=False)
    assert list(confusion.columns) == ["participant_id", "session_id", "coder_a", "coder_b",
                                       "platform_a", "platform_b", "seconds"]
    assert confusion["seconds"].sum() == 18
    study_row = pd.read_csv(out / "agreement" / "study.csv").iloc[0]
    assert study_row["sessions"] == 1 and study_row["seconds_compared"] == 18
    alpha = pd.read_csv(out / "agreement" / "alpha.csv")
    assert alpha.empty and "alpha_attended" in alpha.columns
    assert (out / "agreement" / "switch_matches.csv").is_file()
    # atomic writes leave no temporary files behind
    assert not list((out / "agreement").glob(".*tmp"))


def test_agree_tolerance_option_and_study_toml(tmp_path):
    study = make_study(tmp_path / "study", toml="[agreement]\nswitch_tolerance_s = 0\n")
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["agree", str(study), "--out", str(out)])
    assert result.exit_code == 0, result.output
    row = pd.read_csv(out / "agreement" / "sessions.csv").iloc[0]
    assert row["switch_tolerance_s"] == 0 and row["switch_f1"] == pytest.approx(1 / 3)
    result = CliRunner().invoke(app, ["agree", str(study), "--out", str(out),
                                      "--tolerance", "1"])
    assert result.exit_code == 0, result.output
    row = pd.read_csv(out / "agreement" / "sessions.csv").iloc[0]
    assert row["switch_tolerance_s"] == 1 and row["switch_f1"] == 1.0


def test_agree_without_a_second_coder_is_a_clear_error(tmp_path):
    study = make_study(tmp_path / "study", second_coder=False)
    result = CliRunner().invoke(app, ["agree", str(study), "--out", str(tmp_path / "out")])
    assert result.exit_code == EXIT_INPUT
    assert "no session is coded by two or more coders" in result.output
    assert "coder" in result.output


def test_agree_refuses_an_unknown_matching_rule(tmp_path):
    study = make_study(tmp_path / "study", toml='[agreement]\nswitch_matching = "nearest"\n')
    result = CliRunner().invoke(app, ["agree", str(study), "--out", str(tmp_path / "out")])
    assert result.exit_code == EXIT_INPUT
    assert "greedy" in result.output and "optimal" in result.output


def test_agree_reads_one_log_file_per_coder_and_three_coders_give_alpha(tmp_path):
    # CONTRACT §1: media_log/*.csv, a file without a coder column is coded by its stem
    study = make_study(tmp_path / "study")
    log = pd.read_csv(study / "media_log.csv", keep_default_na=False)
    (study / "media_log.csv").unlink()
    (study / "media_log").mkdir()
    for coder, rows in log.groupby("coder"):
        rows.drop(columns="coder").to_csv(study / "media_log" / f"{coder}.csv", index=False)
    cy = log[(log.coder == "ann") & (log.participant_id == "p01")].drop(columns="coder")
    cy.to_csv(study / "media_log" / "cy.csv", index=False)
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["agree", str(study), "--out", str(out)])
    assert result.exit_code == 0, result.output
    sessions = pd.read_csv(out / "agreement" / "sessions.csv")
    assert sessions[["coder_a", "coder_b"]].values.tolist() == [
        ["ann", "bea"], ["ann", "cy"], ["bea", "cy"]]
    # cy copies ann: perfect agreement on every second both coded
    assert sessions.loc[1, "kappa_attended"] == pytest.approx(1.0)
    alpha = pd.read_csv(out / "agreement" / "alpha.csv")
    assert alpha[["participant_id", "n_coders", "seconds_compared"]].values.tolist() == [
        ["p01", 3, 20]]
    assert "Krippendorff's alpha" in result.output


def test_a_platform_named_none_is_refused(tmp_path):
    study = make_study(tmp_path / "study")
    log = pd.read_csv(study / "media_log.csv", keep_default_na=False)
    log["in_view"] = log["in_view"].str.replace("phone", "none")
    log["attended"] = log["attended"].str.replace("phone", "none")
    log.to_csv(study / "media_log.csv", index=False)
    result = CliRunner().invoke(app, ["agree", str(study), "--out", str(tmp_path / "out")])
    assert result.exit_code == EXIT_INPUT
    assert "'none'" in result.output and "rename" in result.output


def test_agreement_tables_do_not_depend_on_the_log_dtypes(tmp_path):
    # ingest holds the log's text columns as categoricals (int32 seconds); a log of
    # plain strings must give the very same tables
    import dataclasses

    import numpy as np

    from pipeline.agreement.tables import agreement_tables, study_agreement
    from pipeline.config import resolve_study
    from pipeline.ingest import load_study

    folder, cfg, _ = resolve_study(make_study(tmp_path / "study"))
    study = load_study(folder, cfg)
    assert isinstance(study.media_log["coder"].dtype, pd.CategoricalDtype)
    plain = study.media_log.astype({"participant_id": object, "session_id": object,
                                    "second": np.int64, "in_view": object,
                                    "attended": object, "coder": object})
    tables = {}
    for name, log in (("categorical", study.media_log), ("plain", plain)):
        results = study_agreement(dataclasses.replace(study, media_log=log), cfg)
        tables[name] = agreement_tables(results, cfg.agreement.switch_tolerance_s,
                                        cfg.agreement.switch_matching)
    for name, table in tables["plain"].items():
        pd.testing.assert_frame_equal(tables["categorical"][name], table, check_dtype=True)
