"""`elopt show`: text and yes/no parameters fixed by a study config are shown as written
(the study file holds numbers only); the report's search-space table reads the same."""

from __future__ import annotations

from elopt.optimizer.report.study_view import fixed_words


def test_fixed_text_and_bool_values_are_read_from_the_config():
    config = (
        '[study]\nname = "x"\n[fixed]\npad_shape = "round"\nback_ground = true\ndrive_V = 3.3\n'
    )
    assert fixed_words(config) == {"pad_shape": "round", "back_ground": "true"}
    assert fixed_words("not = = toml") == {}
