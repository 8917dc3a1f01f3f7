"""`grasp-harness bench`: the bare baseline really is the trial's own engine work, verdicts follow
the targets, and (pytest -m benchmark) the whole bench meets every target on this machine."""

import argparse
import json

import pytest

from harness.commands import bench


def test_bare_replay_reproduces_the_harness_trial_bit_for_bit(engine):
    # If the replay left out a command or reordered one, the bodies would end elsewhere and the
    # overhead figure would compare against a different simulation (on either engine's own stepping).
    r = bench.measure_overhead(2, repeats=1, engine=engine)
    assert r["replay_exact"]
    assert r["steps"] > r["control_steps"] > 100  # settling steps come before the control steps
    assert 0 < r["setup_s"] < r["bare_s"] and r["harness_s"] > 0
    assert r["value"] == pytest.approx(r["harness_s"] / r["bare_s"])


def test_verdicts_follow_each_targets_direction():
    assert bench.verdict("overhead", 1.15) == "PASS" and bench.verdict("overhead", 1.16) == "MISS"
    assert bench.verdict("scaling", 1.8) == "PASS" and bench.verdict("scaling", 1.79) == "MISS"
    assert bench.verdict("memory", 49.9) == "PASS" and bench.verdict("memory", None) == "-"
    assert bench.verdict("throughput", 3.0) == "-"


def test_resident_memory_reads_proc():
    # 64 MB of anonymous memory touched page by page are resident, and unmapping them returns them
    # at once. Measured across the unmap: memory an earlier test's engine objects hand back while
    # the block is filled would offset a before/after difference (it read 40 MB once), and a freed
    # bytearray is not always returned to the system (it read 0 MB once in a full run).
    import mmap
    block = mmap.mmap(-1, 64 * 2**20)
    for offset in range(0, len(block), mmap.PAGESIZE):  # touch every page so it is resident
        block[offset] = 1
    held = bench.resident_mb()
    block.close()
    assert held - bench.resident_mb() == pytest.approx(64, abs=8)


@pytest.mark.benchmark
def test_bench_meets_every_target(capsys):
    parser = argparse.ArgumentParser()
    bench.register(parser.add_subparsers(dest="command"))
    assert bench.cmd_bench(parser.parse_args(["bench", "--json"])) == 0
    results = json.loads(capsys.readouterr().out)["results"]
    assert set(results) == set(bench.TARGETS)
    assert results["overhead"]["replay_exact"]
    assert results["scaling"]["failed_rows"] == 0 and results["throughput"]["exit_code"] == 0
    missed = {name: r["value"] for name, r in results.items() if r["verdict"] == "MISS"}
    assert not missed, missed
