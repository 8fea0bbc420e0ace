"""Option spellings the user can rely on across verbs."""

from __future__ import annotations

from elopt.optimizer.cli.main import build_parser


def test_run_takes_force_like_the_other_verbs():
    parser = build_parser()
    assert parser.parse_args(["run", "s.toml", "--force"]).overwrite is True
    assert parser.parse_args(["run", "s.toml", "--overwrite"]).overwrite is True
    assert parser.parse_args(["run", "s.toml"]).overwrite is False
    for verb in (["solve", "c.toml"], ["report", "f.h5", "o.html"], ["front", "f.h5"]):
        assert parser.parse_args([*verb, "--force"]).force is True


def test_calibrate_offers_only_number_parameters(capsys):
    from pathlib import Path

    from elopt.optimizer.cli.main import main

    config = Path(__file__).resolve().parents[1] / "configs" / "coplanar_tank_level.toml"
    assert main(["calibrate", str(config), "--param", "standoff_mm"]) == 2
    err = capsys.readouterr().err.strip()
    assert "choose from" in err and "gap_um" in err
    # back_plane and centre_drive are yes/no switches, not numbers to sweep.
    assert "back_plane" not in err and "centre_drive" not in err
