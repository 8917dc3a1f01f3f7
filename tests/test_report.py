"""The HTML report of a small run: every section present, every embedded image a decodable PNG,
nothing fetched from the network, worst trials with their replay commands, and the CLI glue."""

from __future__ import annotations

import argparse
import base64
import io
from html.parser import HTMLParser

import numpy as np
import pytest

from harness.cli import SAFETY
from harness.views.report import SECTIONS, build_report, worst_trials
from harness.commands.report import cmd_report, register
from harness.campaigns.runs import load_run
from test_replay import tiny_run


class Parsed(HTMLParser):
    """Headings, image sources, every attribute value and the visible text of a page."""

    def __init__(self, text):
        super().__init__()
        self.h2, self.images, self.values, self.text, self.tags = [], [], [], [], set()
        self._in_h2 = False
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        self.values += [v for _, v in attrs if v]
        self._in_h2 = tag == "h2"
        if tag == "img":
            self.images.append(dict(attrs)["src"])

    def handle_endtag(self, tag):
        self._in_h2 = False if tag == "h2" else self._in_h2

    def handle_data(self, data):
        self.text.append(data)
        if self._in_h2:
            self.h2.append(data.strip())


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    run, _ = tiny_run(folder)
    out = folder / "report.html"
    report = build_report(run, out, against=run, worst=1)
    return run, report, Parsed(out.read_text(encoding="utf-8"))


def test_every_section_is_there_in_order(made):
    _, _, page = made
    # the run has no error or timeout trials and no pick envelope, so those sections are left out
    assert page.h2 == [title for key, title in SECTIONS.items() if key not in ("errors", "envelope")]


def test_every_embedded_image_decodes_to_a_picture_that_is_not_blank(made):
    from PIL import Image
    _, report, page = made
    assert len(page.images) == report.images >= 6  # outcomes, heat map, metrics, ranking, regression, thumbnails
    for src in page.images:
        head, _, data = src.partition(",")
        assert head == "data:image/png;base64"
        with Image.open(io.BytesIO(base64.b64decode(data, validate=True))) as image:
            assert image.format == "PNG"
            pixels = np.asarray(image.convert("L"), dtype=float)
        assert min(pixels.shape) > 100 and pixels.std() > 5.0


def test_the_page_needs_no_network_and_no_scripts(made):
    _, _, page = made
    assert not {"script", "link", "iframe", "object"} & page.tags
    assert not [v for v in page.values if "http:" in v or "https:" in v or v.startswith("//")]
    assert "http://" not in "".join(page.text) and "https://" not in "".join(page.text)


def test_metadata_counts_and_the_safety_note(made):
    run, _, page = made
    text = " ".join(page.text)
    df = load_run(run)
    assert "8 recorded of 8 planned" in text
    for outcome, n in df["outcome"].value_counts().items():
        assert f"{outcome} {n}" in text
    assert "tiny-replay" in text and "pybullet" in text
    assert SAFETY in text


def test_worst_trials_carry_a_thumbnail_status_and_their_replay_command(made):
    run, report, page = made
    text = " ".join(page.text)
    chosen = worst_trials(load_run(run), 1)
    assert chosen and len(report.replays) == len(chosen)
    for _, _, row in chosen:
        assert f"grasp-harness replay {run} {row['trial_key']} --gif {row['trial_key']}.gif" in text
    # the run was made with the same code, so every thumbnail's replay matches and rendering changed nothing
    assert all(match and steady for _, match, steady in report.replays)
    assert text.count("matches the journal bit for bit") == len(chosen)


def test_the_printed_replay_command_runs_and_matches(made, tmp_path, monkeypatch, capsys):
    import re
    import shlex
    from harness.commands.report import cmd_replay
    _, _, page = made
    command = next(t for t in page.text if t.startswith("grasp-harness replay "))
    parser = argparse.ArgumentParser()
    register(parser.add_subparsers(dest="command"))
    monkeypatch.chdir(tmp_path)
    args = parser.parse_args([*shlex.split(command)[1:], "--every", "10", "--size", "96x72"])
    assert cmd_replay(args) == 0
    assert re.search(r"match: all \d+ columns", capsys.readouterr().out)
    assert (tmp_path / args.gif).stat().st_size > 0


def test_regression_of_a_run_against_itself_finds_no_change(made):
    _, _, page = made
    text = " ".join(page.text)
    assert "Gate: no row significantly worse" in text
    assert "▼ worse" not in text and "▲ better" not in text


def test_report_command_without_a_baseline_leaves_the_regression_out(made, tmp_path, capsys):
    run, _, _ = made
    parser = argparse.ArgumentParser()
    register(parser.add_subparsers(dest="command"))
    out = tmp_path / "plain.html"
    assert cmd_report(parser.parse_args(["report", str(run), "--out", str(out), "--worst", "0"])) == 0
    assert "figure(s)" in capsys.readouterr().out
    page = Parsed(out.read_text(encoding="utf-8"))
    assert SECTIONS["regression"] not in page.h2 and len(page.h2) == len(SECTIONS) - 3  # nor errors, envelope
    assert cmd_report(parser.parse_args(["report", str(tmp_path / "nowhere"), "--out", str(out)])) == 2
    assert "is not a run folder" in capsys.readouterr().err


def test_a_run_folder_holding_a_pick_envelope_shows_its_chart_and_boundary(made, tmp_path):
    import shutil

    from harness.campaigns.envelope import POINTS_CSV, sweep
    from harness.sim.world import PhysicsSettings
    run, _, _ = made
    copy = tmp_path / "run"
    shutil.copytree(run, copy)
    from pathlib import Path
    spec = Path(__file__).resolve().parents[1] / "models" / "grippers" / "duo-roller.toml"
    df = sweep(spec, "duo-roller[finger.roller.radius_mm=12]", ["cylinder"], [0.014], [0.1, 0.6], PhysicsSettings())
    df.to_csv(copy / POINTS_CSV, index=False)
    out = tmp_path / "with-envelope.html"
    before = build_report(copy, out, worst=0).images
    page = Parsed(out.read_text(encoding="utf-8"))
    assert SECTIONS["envelope"] in page.h2
    assert page.h2.index(SECTIONS["envelope"]) == page.h2.index(SECTIONS["difficulty"]) + 1
    text = " ".join(page.text)
    assert "rigid bite boundary mu = tan(beta)" in text and "measured_mu" in text
    (copy / POINTS_CSV).unlink()
    assert build_report(copy, out, worst=0).images == before - 1


def test_dropped_and_ejected_trials_come_under_their_own_headings():
    import pandas as pd
    df = pd.DataFrame({
        "trial_key": ["d1", "e1", "h1", "h2"], "variant": ["v"] * 4, "object": ["a", "b", "c", "d"],
        "routine": ["roll"] * 4, "outcome": ["dropped", "ejected", "held", "held"],
        "slip_mm": [3.0, 9.0, 5.0, 1.0], "drift_mm": [float("nan"), float("nan"), 0.5, 2.0]})
    kinds = {kind: [r["trial_key"] for k, _, r in worst_trials(df, 2) if k == kind]
             for kind in ("dropped", "ejected", "largest slip", "largest drift")}
    assert kinds == {"dropped": ["d1"], "ejected": ["e1"], "largest slip": ["h1", "h2"], "largest drift": []}
