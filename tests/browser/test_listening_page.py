"""The listening page in a real browser: it loads from disk, plays, keeps and saves answers.

A short comparison of the demo presets (one note, six blind trials, fixed
seed) is written with --page; headless Chromium opens listen.html from the
file system (file://, no server, no network). The saved answers file is
scored by `barwright compare --score`, and the count is checked against answers
built from the key so the right score is known beforehand; the chance figure
is checked against scipy's exact binomial test.
"""

from __future__ import annotations

import json
import time
import tomllib
from pathlib import Path

import pytest
import scipy.stats
import soundfile as sf
from typer.testing import CliRunner

from synth.cli import app
from synth.config import presets_dir

DESIGN_A = presets_dir() / "instruments" / "lantern-street-bars.toml"
DESIGN_B = presets_dir() / "instruments" / "lantern-street-bars-7075.toml"
TRIALS = 6
RIGHT = 4  # answer the first four trials right and the last two wrong
BLOCK = 1024  # samples: a loaded player's duration must match its WAV within one block
WAIT_S = 60.0  # the longest any wait for the browser may take before the test gives up


def run(*args):
    """Invoke ``barwright`` in-process; stdout and stderr apart."""
    return CliRunner().invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    """Write one comparison with its listening page and six blind trials."""
    out = tmp_path_factory.mktemp("page") / "out"
    r = run("compare", DESIGN_A, DESIGN_B, "--notes", "A4", "--tail", "1.0", "--blind", TRIALS,
            "--seed", 5, "--page", "--out", out)
    assert r.exit_code == 0, r.output + r.stderr
    return out


def wait_for(driver, script: str, what: str):
    """Poll a script until it returns a truthy value; fail naming ``what`` after WAIT_S."""
    end = time.monotonic() + WAIT_S
    while time.monotonic() < end:
        value = driver.execute_script(script)
        if value:
            return value
        time.sleep(0.1)
    pytest.fail(f"the page never reached: {what}")


def wait_for_file(folder: Path, pattern: str) -> Path:
    """Wait until a finished download matching ``pattern`` is in ``folder``."""
    end = time.monotonic() + WAIT_S
    while time.monotonic() < end:
        done = [p for p in folder.glob(pattern) if not p.name.endswith(".crdownload")]
        if done and done[0].stat().st_size > 0:
            return done[0]
        time.sleep(0.1)
    pytest.fail(f"no download {pattern} in {folder}")


def open_page(driver, folder: Path) -> None:
    """Load the page and wait until every player has its metadata."""
    driver.get((folder / "listen.html").as_uri())
    wait_for(driver, "return Array.from(document.querySelectorAll('audio'))"
                     ".every(a => a.readyState >= 1)", "every player loaded")


def test_the_page_holds_no_key(folder) -> None:
    """Which design X is appears nowhere in the page: only the key file holds it."""
    text = (folder / "listen.html").read_text()
    key = tomllib.loads((folder / "blind-key.toml").read_text())
    data = text.split('id="page-data">', 1)[1].split("</script>", 1)[0]
    assert set(json.loads(data)) >= {"run", "trials", "trialFiles"}
    assert not {"x", "seed", "key"} & set(json.loads(data))
    assert json.dumps(key["x"]) not in text and f"seed = {key['seed']}" not in text
    assert "blind-key.toml" in text  # it says how to score, but not the key itself
    assert "http://" not in text and "https://" not in text  # nothing fetched from a network


def test_players_load_and_play_answers_are_kept_saved_and_scored(folder, browser,
                                                                  tmp_path) -> None:
    """Load every player from disk, play one part, answer, reload, save, score."""
    open_page(browser, folder)
    players = browser.execute_script(
        "return Array.from(document.querySelectorAll('audio')).map(a => ({src: "
        "a.getAttribute('src'), duration: a.duration, volume: a.volume, paused: a.paused, "
        "autoplay: a.autoplay, label: a.getAttribute('aria-label') || "
        "a.getAttribute('aria-labelledby')}))")
    assert len(players) == 3 + TRIALS
    for p in players:
        info = sf.info(folder / p["src"])
        assert abs(p["duration"] - info.frames / info.samplerate) <= BLOCK / info.samplerate, p
        assert p["volume"] == pytest.approx(0.3)  # starts quiet
        assert p["paused"] and not p["autoplay"]  # nothing plays by itself
        assert p["label"]

    # Play the unknown part of trial 1: it starts at 2 (part + gap) and plays.
    key = tomllib.loads((folder / "blind-key.toml").read_text())
    part = sf.info(folder / "A.wav").frames / sf.info(folder / "A.wav").samplerate
    browser.find_element("css selector", "button[data-trial='1'][data-part='X']").click()
    t = wait_for(browser, "const a = document.getElementById('trial-audio-1'); "
                          "return !a.paused && a.currentTime > 0 && a.currentTime", "playing")
    assert t >= 2 * (part + key["gap_s"]) - 1e-3

    # Answer: right for the first RIGHT trials, wrong for the rest.
    other = {"A": "B", "B": "A"}
    wanted = [x if k < RIGHT else other[x] for k, x in enumerate(key["x"])]
    for k, a in enumerate(wanted, start=1):
        browser.find_element("css selector",
                             f"input[name='answer-{k}'][value='{a}']").click()
    status = browser.find_element("id", "progress").text
    assert f"Answered {TRIALS} of {TRIALS}" in status

    # Kept in the browser: a reload shows the same answers.
    open_page(browser, folder)
    shown = browser.execute_script(
        f"return Array.from({{length: {TRIALS}}}, (_, i) => (document.querySelector("
        "`input[name='answer-${i + 1}']:checked`) || {value: null}).value)")
    assert shown == wanted

    browser.find_element("id", "save").click()
    saved = wait_for_file(browser.downloads, "answers-*.json")
    record = json.loads(saved.read_text())
    assert record["run"] == key["run"] and record["answers"] == wanted

    r = run("compare", "--score", folder / "blind-key.toml", "--answers-file", saved)
    assert r.exit_code == 0, r.output + r.stderr
    p = scipy.stats.binomtest(RIGHT, TRIALS, 0.5, alternative="greater").pvalue  # 22/64
    assert f"trials answered correctly: {RIGHT} of {TRIALS}" in r.stdout
    assert f"chance of doing this well by guessing: {100 * p:.0f} %" in r.stdout
    r = run("compare", "--score", folder / "blind-key.toml", "--answers-file", saved, "--json")
    data = json.loads(r.stdout)
    assert data["correct"] == RIGHT and data["chance_by_guessing"] == pytest.approx(p, rel=1e-12)


@pytest.mark.parametrize(("width", "height", "mobile"), [(1280, 900, False), (390, 844, True)])
def test_layout_fits_desktop_and_phone(folder, browser, tmp_path, width, height,
                                       mobile) -> None:
    """No sideways scrolling; the three players sit inside the window; a screenshot is kept."""
    browser.execute_cdp_cmd("Emulation.setDeviceMetricsOverride",
                            {"width": width, "height": height, "deviceScaleFactor": 1,
                             "mobile": mobile})
    open_page(browser, folder)
    inner = browser.execute_script("return window.innerWidth")
    assert inner == width
    scroll = browser.execute_script("return document.documentElement.scrollWidth")
    assert scroll <= inner, (scroll, inner)
    for pid in ("audio-a", "audio-b", "audio-ab"):
        box = browser.execute_script(
            f"const r = document.getElementById('{pid}').getBoundingClientRect(); "
            "return {left: r.left, right: r.right, width: r.width, height: r.height}")
        assert box["width"] > 0.5 * min(inner, 300) and box["height"] > 0, (pid, box)
        assert box["left"] >= 0 and box["right"] <= inner, (pid, box)
    # Buttons big enough to hit with a finger (44 CSS px, WCAG 2.1 target size, 2.5.5).
    small = browser.execute_script(
        "return Array.from(document.querySelectorAll('button')).filter("
        "b => b.getBoundingClientRect().height < 44).length")
    assert small == 0
    shot = tmp_path / f"listen-{width}x{height}.png"
    browser.save_screenshot(str(shot))
    assert shot.stat().st_size > 0
    print(f"screenshot: {shot}")


def test_keyboard_alone_answers_a_trial(folder, browser) -> None:
    """Tab to trial 1's A, Space to choose it, arrow to B: the choice is kept, no mouse."""
    from selenium.webdriver.common.keys import Keys

    open_page(browser, folder)
    browser.execute_script("localStorage.clear()")
    open_page(browser, folder)
    first = browser.find_element("css selector", "input[name='answer-1'][value='A']")
    body = browser.find_element("tag name", "body")
    body.send_keys(Keys.TAB)
    for _ in range(60):  # walk the tab order until trial 1's first answer has the focus
        if browser.switch_to.active_element == first:
            break
        browser.switch_to.active_element.send_keys(Keys.TAB)
    assert browser.switch_to.active_element == first, "trial 1's answer is not in the tab order"
    first.send_keys(Keys.SPACE)
    browser.switch_to.active_element.send_keys(Keys.ARROW_RIGHT)
    kept = browser.execute_script(
        "return JSON.parse(localStorage.getItem(JSON.parse(document.getElementById("
        "'page-data').textContent).storageKey)).answers[0]")
    assert kept == "B"
    # Every control has a name a screen reader can say.
    unnamed = browser.execute_script(
        "return Array.from(document.querySelectorAll('button, input, audio')).filter(e => "
        "!(e.getAttribute('aria-label') || e.getAttribute('aria-labelledby') || "
        "e.closest('label') || (e.id && document.querySelector(`label[for='${e.id}']`)) || "
        "e.textContent.trim())).map(e => e.outerHTML.slice(0, 80))")
    assert unnamed == []
