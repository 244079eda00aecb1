"""Scoring ABX answers: exact one-sided binomial p against guessing.

Check values: physics note, section 12 (computed there as exact binomial tails):
12/16 0.03841, 13/16 0.01064, 9/10 0.01074, 8/10 0.05469, 15/20 0.02069,
14/20 0.05766; and scipy.stats.binomtest (alternative="greater"), an independent
implementation of the same test.
"""

from __future__ import annotations

import json

import pytest
import scipy.stats
from compare_helpers import assert_one_line_error, run

from synth.reports.compare import (
    BlindKey,
    abx_key,
    binomial_p_value,
    key_toml,
    parse_answers,
    score_answers,
)
from synth.settings.comparison import read_key

KEY_16 = tuple("ABBABAABBBAABABA")


@pytest.mark.parametrize(("correct", "trials", "p"), [
    (12, 16, 0.03841), (13, 16, 0.01064), (9, 10, 0.01074), (8, 10, 0.05469),
    (15, 20, 0.02069), (14, 20, 0.05766),
])
def test_binomial_tail_matches_the_physics_note(correct: int, trials: int, p: float) -> None:
    """The note gives five decimals, so the tolerance is half a unit of the last: 5e-6."""
    assert binomial_p_value(correct, trials) == pytest.approx(p, abs=5e-6)
    ref = scipy.stats.binomtest(correct, trials, 0.5, alternative="greater").pvalue
    assert binomial_p_value(correct, trials) == pytest.approx(ref, rel=1e-12)


def test_edge_counts() -> None:
    """0 right: p = 1 (certain by guessing); all right: p = 2^-n exactly."""
    assert binomial_p_value(0, 16) == 1.0
    assert binomial_p_value(16, 16) == 2.0 ** -16


def _answers_with(n_right: int, key=KEY_16) -> tuple[str, ...]:
    flip = {"A": "B", "B": "A"}
    return tuple(k if i < n_right else flip[k] for i, k in enumerate(key))


def test_score_12_of_16() -> None:
    """12 of 16 right gives p = 0.03841 (physics note, section 12)."""
    s = score_answers(KEY_16, _answers_with(12))
    assert (s.correct, s.trials) == (12, 16)
    assert s.p_value == pytest.approx(0.03841, abs=5e-6)
    assert sum(s.right) == 12


def test_answer_forms() -> None:
    """Commas, spaces or one run of letters, any case, mean the same answers."""
    want = ("A", "B", "B", "A")
    assert parse_answers("A,B,B,A") == want
    assert parse_answers("a b b a") == want
    assert parse_answers("ABBA") == want


def test_key_round_trip(tmp_path) -> None:
    """A key written as TOML reads back the same."""
    key = BlindKey(x=KEY_16, seed=5, design_a='dir "x"/a.toml', design_b="b.toml",
                   files=tuple(f"blind-{k:02d}.wav" for k in range(1, 17)), gap_s=0.5)
    p = tmp_path / "key.toml"
    p.write_text(key_toml(key), encoding="utf-8")
    back = read_key(p)
    assert back.x == KEY_16 and back.seed == 5 and back.design_a == key.design_a
    assert back.files == key.files and back.trials == 16


def test_key_draws_are_fair_and_seeded() -> None:
    """Same seed, same key; over 4000 draws the share of A lies within 4 sigma of 1/2.

    Binomial standard deviation sqrt(4000 / 4) = 31.6 draws; 4 sigma = 126.
    """
    assert abx_key(16, 3) == abx_key(16, 3)
    assert abx_key(16, 3) != abx_key(16, 4)
    n_a = abx_key(4000, 99).count("A")
    assert abs(n_a - 2000) <= 126


def test_cli_scores_12_of_16(tmp_path) -> None:
    """The command prints the count, the chance 3.8 % (p = 0.03841) and the reminder."""
    key = tmp_path / "key.toml"
    key.write_text(key_toml(BlindKey(x=KEY_16, seed=1, design_a="a.toml", design_b="b.toml",
                                     files=(), gap_s=0.5)), encoding="utf-8")
    answers = ",".join(_answers_with(12))
    r = run("compare", "--score", key, "--answers", answers)
    assert r.exit_code == 0, r.stdout + r.stderr
    assert ("trials answered correctly: 12 of 16; chance of doing this well by guessing: "
            "3.8 %") in r.stdout
    assert "Fix the number of trials before listening" in r.stdout
    r = run("compare", "--score", key, "--answers", answers, "--json")
    data = json.loads(r.stdout)
    assert data["correct"] == 12 and data["trials"] == 16
    assert data["chance_by_guessing"] == pytest.approx(0.03841, abs=5e-6)


def _answers_file(path, answers, run="r1", fmt="barwright blind answers"):
    path.write_text(json.dumps({"format": fmt, "version": 1, "run": run,
                                "trials": len(answers), "answers": list(answers)}))
    return path


def test_cli_scores_an_answers_file(tmp_path) -> None:
    """The listening page's file scores like --answers: 12 of 16, chance 3.8 % (p 0.03841)."""
    key = tmp_path / "blind-key.toml"
    key.write_text(key_toml(BlindKey(x=KEY_16, seed=1, design_a="a.toml", design_b="b.toml",
                                     files=(), gap_s=0.5, run="r1")), encoding="utf-8")
    f = _answers_file(tmp_path / "answers.json", _answers_with(12))
    r = run("compare", "--score", key, "--answers-file", f, "--json")
    assert r.exit_code == 0, r.stdout + r.stderr
    data = json.loads(r.stdout)
    assert data["correct"] == 12
    assert data["chance_by_guessing"] == pytest.approx(0.03841, abs=5e-6)


def test_cli_refuses_bad_answers_files(tmp_path) -> None:
    """Another run, an open trial, a foreign file, both answer forms: exit 2, one line."""
    key = tmp_path / "blind-key.toml"
    key.write_text(key_toml(BlindKey(x=KEY_16, seed=1, design_a="a.toml", design_b="b.toml",
                                     files=(), gap_s=0.5, run="r1")), encoding="utf-8")
    full = _answers_with(12)
    cases = [
        (_answers_file(tmp_path / "other.json", full, run="r2"), "run 'r2'"),
        (_answers_file(tmp_path / "open.json", [None] + list(full[1:])), "trial 1 is not"),
        (_answers_file(tmp_path / "short.json", full[:15]), "15 answers"),
        (_answers_file(tmp_path / "foreign.json", full, fmt="x"), "not an answers file"),
    ]
    for path, needle in cases:
        r = run("compare", "--score", key, "--answers-file", path)
        assert_one_line_error(r, "--answers-file", needle)
    (tmp_path / "junk.json").write_text("{not json")
    r = run("compare", "--score", key, "--answers-file", tmp_path / "junk.json")
    assert_one_line_error(r, "--answers-file", "junk.json")
    r = run("compare", "--score", key, "--answers", "A", "--answers-file", cases[0][0])
    assert_one_line_error(r, "not both")


def test_cli_wrong_answer_count(tmp_path) -> None:
    """15 answers for 16 trials: exit 2 with one line naming --answers."""
    key = tmp_path / "key.toml"
    key.write_text(key_toml(BlindKey(x=KEY_16, seed=1, design_a="a.toml", design_b="b.toml",
                                     files=(), gap_s=0.5)), encoding="utf-8")
    r = run("compare", "--score", key, "--answers", ",".join(KEY_16[:15]))
    assert_one_line_error(r, "--answers", "15 answers", "16 trials")
    r = run("compare", "--score", key, "--answers", "A,B,C" + ",A" * 13)
    assert_one_line_error(r, "--answers", "'C'")


def test_cli_bad_key(tmp_path) -> None:
    """A key whose x list does not match its trial count: exit 2 naming the file and key."""
    key = tmp_path / "key.toml"
    key.write_text('trials = 3\nx = ["A", "B"]\n', encoding="utf-8")
    r = run("compare", "--score", key, "--answers", "A,B,A")
    assert_one_line_error(r, str(key), "x")
    r = run("compare", "--score", tmp_path / "missing.toml", "--answers", "A")
    assert_one_line_error(r, "missing.toml", "not found")
