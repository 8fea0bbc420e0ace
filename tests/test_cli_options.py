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
