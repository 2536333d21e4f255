"""Fleet replay on a Dask cluster the test starts on this machine, loopback only.

References: a local replay of each bag (the cluster's per-bag estimates.csv must be the same
bytes), the scheduler's own list of its workers (every address on 127.0.0.1), runs.json as read
by the json module, fleet.html as parsed by the standard library's HTML parser, and each bag's
summary.json for the figures the thresholds judge.
"""
from __future__ import annotations

import json
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest

from interaction_estimator import cli
from interaction_estimator.sim.recording import write_simulated_bag
from interaction_estimator.sim.simulator import simulate

distributed = pytest.importorskip(
    "distributed", reason="the [fleet] extra (Dask distributed) is not installed here")


@pytest.fixture(scope="module")
def cluster():
    """Scheduler and two single-threaded worker processes, bound to 127.0.0.1 only."""
    local = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                     host="127.0.0.1", dashboard_address="127.0.0.1:0")
    try:
        with distributed.Client(local.scheduler_address) as client:
            workers = list(client.scheduler_info()["workers"])
        assert local.scheduler_address.startswith("tcp://127.0.0.1:")
        assert len(workers) == 2 and all(w.startswith("tcp://127.0.0.1:") for w in workers)
        # reference: the operating system's table of listening sockets (through psutil) for
        # this process and the worker processes: loopback only
        import psutil
        me = psutil.Process()
        pids = {me.pid} | {c.pid for c in me.children(recursive=True)}
        listening = [c.laddr for c in psutil.net_connections("inet")
                     if c.status == psutil.CONN_LISTEN and c.pid in pids]
        assert listening and all(a.ip == "127.0.0.1" for a in listening), listening
        yield local.scheduler_address
    finally:
        local.close()


@pytest.fixture(scope="module")
def fleet_bags(tmp_path_factory):
    """Four short simulated bags in a folder, and a fifth whose MCAP file is cut short."""
    d = tmp_path_factory.mktemp("fleet") / "recordings"
    d.mkdir()
    for name, scenario, seed in (("drawer_a", "drawer", 1), ("drawer_b", "drawer", 2),
                                 ("toolbox_a", "toolbox", 3), ("cart_a", "cart", 4)):
        write_simulated_bag(d / name, simulate(scenario, duration=None if scenario != "drawer"
                                               else 3.5, seed=seed))
    shutil.copytree(d / "drawer_a", d / "broken")
    mcap = next((d / "broken").glob("*.mcap"))
    data = mcap.read_bytes()
    mcap.write_bytes(data[: len(data) // 3])
    return d


def test_cluster_replay_equals_local_and_isolates_a_broken_bag(cluster, fleet_bags, tmp_path,
                                                               capsys):
    local, remote = tmp_path / "local", tmp_path / "remote"
    assert cli.main(["replay", str(fleet_bags), "--out", str(local), "--no-report"]) == 2
    code = cli.main(["replay", str(fleet_bags / "*"), "--out", str(remote), "--cluster",
                     cluster, "--limit-force-rmse", "1.0", "--limit-convergence-time", "30"])
    captured = capsys.readouterr()
    assert code == 2   # one bag failed, and the message names it
    assert "broken" in captured.err and "replayed 4 of 5 bags" in captured.out

    doc = json.loads((remote / "runs.json").read_text())
    runs = {Path(r["bag"]).name: r for r in doc["runs"]}
    assert set(runs) == {"broken", "cart_a", "drawer_a", "drawer_b", "toolbox_a"}
    assert not runs["broken"]["ok"] and "retry" in runs["broken"]["error"]
    assert doc["failed"] == 1 and doc["engine"].startswith("dask distributed")
    for name in ("cart_a", "drawer_a", "drawer_b", "toolbox_a"):
        assert runs[name]["ok"], runs[name]
        # reference: the same bag replayed locally, byte for byte
        assert (remote / name / "estimates.csv").read_bytes() == \
            (local / name / "estimates.csv").read_bytes()
        assert (remote / name / "report.html").exists()
        # the thresholds judge the figures of the bag's own summary.json
        summary = json.loads((remote / name / "summary.json").read_text())
        rmse = summary["force"]["rmse_contact_N"]
        conv = summary["time_to_convergence_s"]
        expected_short = (rmse is None or rmse > 1.0) or (conv is None or conv > 30.0)
        assert bool(runs[name]["shortfalls"]) == expected_short, (name, rmse, conv)
        assert runs[name]["figures"]["force_rmse_contact_N"] == rmse
    assert doc["short"] == sum(bool(r.get("shortfalls")) for r in doc["runs"] if r["ok"])
    assert doc["thresholds"]["max_force_rmse_contact_N"] == 1.0

    # fleet.html: the per-bag table, the three distributions, and the lists
    class Page(HTMLParser):
        def __init__(self):
            super().__init__()
            self.ids, self.rows, self._in_body = set(), 0, False

        def handle_starttag(self, tag, attrs):
            a = dict(attrs)
            if "id" in a:
                self.ids.add(a["id"])
            if tag == "tbody":
                self._in_body = True
            if tag == "tr" and self._in_body:
                self.rows += 1

    page = Page()
    text = (remote / "fleet.html").read_text()
    page.feed(text)
    assert {"fig-rmse", "fig-convergence", "fig-rejects", "bags", "short", "failed"} <= page.ids
    assert page.rows == 5
    assert text.count("<svg") == 3
    for name, r in runs.items():
        if r["ok"] and r["shortfalls"]:
            assert f"<b>{name}</b>" in text


def test_local_run_of_a_folder_writes_the_same_files(fleet_bags, tmp_path, capsys):
    out = tmp_path / "o"
    code = cli.main(["replay", str(fleet_bags / "drawer_a"), str(fleet_bags / "drawer_b"),
                     "--out", str(out), "--jobs", "2", "--require-convergence"])
    assert code == 0, capsys.readouterr().err
    doc = json.loads((out / "runs.json").read_text())
    assert doc["engine"] == "local, 2 processes" and doc["failed"] == 0
    assert sorted(p.name for p in out.iterdir()) == ["drawer_a", "drawer_b", "fleet.html",
                                                     "runs.json"]
    for r in doc["runs"]:
        summary = json.loads((Path(r["out"]) / "summary.json").read_text())
        assert bool(r["shortfalls"]) == (not summary["converged"])


def test_cluster_errors_are_clear(fleet_bags, tmp_path, capsys):
    code = cli.main(["replay", str(fleet_bags / "drawer_a"), "--out", str(tmp_path / "o"),
                     "--cluster", "tcp://127.0.0.1:9"])   # nothing listens on port 9 here
    assert code == 2
    err = capsys.readouterr().err
    assert "cannot reach the cluster at 'tcp://127.0.0.1:9'" in err
    code = cli.main(["replay", str(tmp_path / "none*"), "--out", str(tmp_path / "p")])
    assert code == 2 and "matches no bag" in capsys.readouterr().err
    empty = tmp_path / "empty"
    empty.mkdir()
    code = cli.main(["replay", str(empty), "--out", str(tmp_path / "q")])
    assert code == 2 and "holds no bags" in capsys.readouterr().err
