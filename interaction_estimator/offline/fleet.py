"""Replays of many bags: on this computer (a process pool) or on a Dask cluster (``--cluster``),
with ``DIR/runs.json`` and ``DIR/fleet.html`` over all of them.

``replay BAGS... --out DIR [--cluster ADDRESS]``: each BAGS argument is a bag (a rosbag2
directory, an .mcap or .db3 file), a directory holding bags, or a glob pattern in quotes
(``'recordings/2026-12-*/*.mcap'``): thousands of bags are expected. One task per bag; each
bag's outputs go to ``DIR/<bag name>/`` exactly as a one-bag replay writes them (the same
function runs: :func:`.replay.replay`), so a bag's estimates.csv is the same bytes whichever way
it ran.

On a cluster (Dask distributed, the optional ``[fleet]`` extra): the scheduler at ADDRESS
(``tcp://host:8786``) hands the tasks to its workers, and a task that fails is tried once more
(``retries=1``, on any worker) before the bag is reported as failed; one bag's failure never
stops the others. The workers read the bags and write DIR at the paths given here, so bags and
DIR must be on storage every worker sees at the same path (a shared or network file system),
and the workers need this package installed (one process per worker and one thread each:
``dask worker ADDRESS --nworkers N --nthreads 1``).

runs.json: one entry per bag (bag, output, ok, error, the key figures of its summary, worker and
wall time) and the thresholds the user gave with the bags that fell short of them. fleet.html:
the per-bag table, distributions of the force RMSE in contact and of the time to convergence,
rejects by reason, and the bags that fell short, with the reasons.
"""
from __future__ import annotations

import glob
import html
import json
import math
import os
import time
import uuid
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..io.files import write_atomic
from .replay import INPUT_ERRORS, ReplayError, ReplayRequest, check_output_dir, replay
from .svgplot import Chart

BAG_SUFFIXES = (".mcap", ".db3")
RUNS_FILE, FLEET_PAGE = "runs.json", "fleet.html"


# --------------------------------------------------------------------------------------------
# which bags


def is_bag(path: Path) -> bool:
    """A rosbag2 directory (with metadata.yaml) or a single .mcap / .db3 file."""
    return (path.is_dir() and (path / "metadata.yaml").is_file()) or (
        path.is_file() and path.suffix in BAG_SUFFIXES)


def expand_bags(arguments: Sequence[Path | str]) -> list[Path]:
    """The bags the arguments name, in order, each once: a bag as it is; a directory that is
    not a bag: the bags directly inside it (sorted by name); a glob pattern: the bags it
    matches (sorted). A path that exists as none of these is kept as given, so that the
    replay names what is wrong with it. Raises ReplayError for a pattern or directory that
    finds no bag."""
    out: list[Path] = []
    for arg in arguments:
        text = str(arg)
        path = Path(text)
        if path.exists():
            if path.is_dir() and not is_bag(path):
                found = sorted(p for p in path.iterdir() if is_bag(p))
                if not found:
                    raise ReplayError(f"directory {text!r} is not a bag and holds no bags; "
                                      "expected a rosbag2 directory (with metadata.yaml), "
                                      ".mcap or .db3 files, or folders of them")
                out += found
            else:
                out.append(path)
        elif glob.has_magic(text):
            found = sorted(Path(p) for p in glob.glob(text) if is_bag(Path(p)))
            if not found:
                raise ReplayError(f"pattern {text!r} matches no bag; expected rosbag2 "
                                  "directories, .mcap or .db3 files")
            out += found
        else:
            out.append(path)   # missing: the replay says so
    seen: set[Path] = set()
    unique = []
    for p in out:
        key = p.resolve()
        if key not in seen:
            seen.add(key)
            unique.append(p)
    return unique


# --------------------------------------------------------------------------------------------
# thresholds


@dataclass(frozen=True)
class Thresholds:
    """What a bag must meet to pass (None: not checked). force_rmse_N: force RMSE in contact
    against the bag's reference, N, at most; convergence_s: time to convergence of all four
    parameters after the first contact, s, at most; reject_share: rejected joint states over
    those read, at most (0-1); converged: all four parameters converged at the end."""

    force_rmse_N: float | None = None
    convergence_s: float | None = None
    reject_share: float | None = None
    converged: bool = False

    def as_dict(self) -> dict[str, Any]:
        return {"max_force_rmse_contact_N": self.force_rmse_N,
                "max_time_to_convergence_s": self.convergence_s,
                "max_reject_share": self.reject_share,
                "require_converged": self.converged}

    def shortfalls(self, figures: dict[str, Any]) -> list[str]:
        """Why a replayed bag falls short (empty: it passes)."""
        why = []
        rmse = figures.get("force_rmse_contact_N")
        if self.force_rmse_N is not None:
            if rmse is None:
                why.append("no force RMSE (the bag has no reference wrench)")
            elif rmse > self.force_rmse_N:
                why.append(f"force RMSE in contact {rmse:.4g} N > {self.force_rmse_N:g} N")
        conv = figures.get("time_to_convergence_s")
        if self.convergence_s is not None:
            if conv is None:
                why.append("did not converge (no time to convergence)")
            elif conv > self.convergence_s:
                why.append(f"time to convergence {conv:.4g} s > {self.convergence_s:g} s")
        share = figures.get("reject_share")
        if self.reject_share is not None and share is not None and share > self.reject_share:
            why.append(f"rejected share {share:.3g} > {self.reject_share:g}")
        if self.converged and not figures.get("converged"):
            why.append("not all four parameters converged at the end")
        return why


def key_figures(summary: dict[str, Any]) -> dict[str, Any]:
    """The figures of one bag's summary that the fleet files compare."""
    run = summary.get("run", {})
    read = run.get("samples_read") or 0
    rejected = run.get("samples_rejected") or 0
    return {
        "force_rmse_contact_N": summary.get("force", {}).get("rmse_contact_N"),
        "force_rmse_N": summary.get("force", {}).get("rmse_N"),
        "time_to_convergence_s": summary.get("time_to_convergence_s"),
        "converged": summary.get("converged"),
        "final_state": summary.get("final_state"),
        "final_level": summary.get("final_level"),
        "samples_read": read,
        "samples_rejected": rejected,
        "reject_share": rejected / read if read else None,
        "rejects": {k: v for k, v in summary.get("rejects", {}).items() if v},
        "duration_s": run.get("duration_s"),
    }


# --------------------------------------------------------------------------------------------
# running


def _task(req: ReplayRequest) -> dict[str, Any]:
    """One bag on a cluster worker: the replay, its summary's key figures, where and how long.
    Raises on failure, so that the scheduler tries it once more."""
    import socket
    t0 = time.perf_counter()
    result = replay(req)
    return {"figures": key_figures(result.summary), "worker": socket.gethostname(),
            "pid": os.getpid(), "wall_s": time.perf_counter() - t0}


def _local_task(req: ReplayRequest) -> tuple[dict[str, Any] | None, str]:
    """One bag in a local process: (result, "") or (None, why). Any failure stays this bag's
    (an unexpected one is named with its type, as on a cluster)."""
    try:
        return _task(req), ""
    except Exception as exc:
        return None, _error_text(exc)


def _error_text(exc: BaseException) -> str:
    if isinstance(exc, INPUT_ERRORS):
        return str(exc)
    return f"{type(exc).__name__}: {exc}"


def run_local(requests: list[ReplayRequest], jobs: int
              ) -> list[tuple[dict[str, Any] | None, str]]:
    """Every bag in a pool of ``jobs`` processes (as the replay always did)."""
    with ProcessPoolExecutor(max_workers=max(1, min(jobs, len(requests)))) as pool:
        return list(pool.map(_local_task, requests))


def run_on_cluster(requests: list[ReplayRequest], address: str,
                   progress: Callable[[int, int], None] | None = None
                   ) -> list[tuple[dict[str, Any] | None, str]]:
    """Every bag as one task on the Dask scheduler at ``address``; a failed task is tried
    once more. Returns (result, "") or (None, why) per request, in order."""
    try:
        from distributed import Client, as_completed
    except ImportError:
        raise ReplayError("--cluster needs Dask distributed, the optional 'fleet' extra: "
                          "pip install 'interaction_estimator[fleet]'") from None
    try:
        client = Client(address, timeout="20s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ReplayError(f"cannot reach the cluster at {address!r}: {exc}; expected the "
                          "address of a running Dask scheduler, e.g. tcp://host:8786") from None
    results: list[tuple[dict[str, Any] | None, str]] = [(None, "not run")] * len(requests)
    try:
        run_id = uuid.uuid4().hex[:12]   # keys unique on a scheduler shared by many runs
        futures = [client.submit(_task, req, key=f"replay-{run_id}-{i}-{Path(req.out).name}",
                                 retries=1, pure=False)
                   for i, req in enumerate(requests)]
        index = {f.key: i for i, f in enumerate(futures)}
        done = 0
        for future in as_completed(futures, loop=client.loop):
            i = index[future.key]
            if future.status == "finished":
                results[i] = (future.result(), "")
            else:
                exc = future.exception()
                results[i] = (None, _error_text(exc) + " (failed twice: first try and retry)")
            future.release()
            done += 1
            if progress is not None:
                progress(done, len(requests))
    finally:
        client.close()
    return results


def replay_fleet(requests: list[ReplayRequest], out: Path, jobs: int,
                 log: Callable[[str], None], cluster: str | None = None,
                 thresholds: Thresholds = Thresholds()) -> tuple[int, int]:
    """Replay every request into ``out/<name>/``, locally (``jobs`` processes) or on
    ``cluster``; write runs.json and fleet.html. Returns (failed, short): bags that failed,
    and bags that ran but fell short of the thresholds. Each failure is logged."""
    check_output_dir(out)
    out.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    results = (run_on_cluster(requests, cluster) if cluster
               else run_local(requests, jobs))
    wall = time.perf_counter() - t0
    runs, failed, short = [], 0, 0
    for req, (result, error) in zip(requests, results):
        entry: dict[str, Any] = {"bag": str(req.bag), "out": str(req.out),
                                 "ok": result is not None, "error": error or None}
        if result is None:
            failed += 1
            log(f"{req.bag}: {error}")
        else:
            entry.update(result)
            entry["shortfalls"] = thresholds.shortfalls(result["figures"])
            short += bool(entry["shortfalls"])
        runs.append(entry)
    doc = {"engine": f"dask distributed at {cluster}" if cluster else f"local, {jobs} processes",
           "bags": len(requests), "failed": failed, "short": short, "wall_time_s": wall,
           "thresholds": thresholds.as_dict(), "runs": runs}
    write_atomic(out / RUNS_FILE, json.dumps(doc, indent=2, allow_nan=False) + "\n")
    write_atomic(out / FLEET_PAGE, fleet_page(doc))
    return failed, short


# --------------------------------------------------------------------------------------------
# fleet.html

INK, PAPER, PANEL, ACCENT = "#1d2731", "#f6f4ef", "#ffffff", "#0f6e7a"
FAIL, SHORT, PASS = "#b5302a", "#e8b931", "#7cc16a"


def _num(v: Any, digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "\u2014"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:.{digits}g}"
    return html.escape(str(v))


def histogram_svg(values: Iterable[float | None], title: str, unit: str, limit: float | None
                  ) -> str:
    """Counts of ``values`` in about 20 equal bins (None and non-finite left out, and said),
    with the user's limit drawn."""
    values = list(values)
    vals = np.array([v for v in values if v is not None and math.isfinite(v)], float)
    missing = len(values) - len(vals)
    chart = Chart(1, 1, 4.6, 2.4, 0.6, 0.15, 0.55, 0.35, 0.3, 0.2, INK, "#e3e0d8", "#8a949e",
                  PANEL)
    ax = chart.panels[0][0]
    ax.title = title + (f" ({missing} without)" if missing else "")
    ax.xlabel = unit
    if len(vals):
        lo, hi = float(vals.min()), float(vals.max())
        if limit is not None:
            lo, hi = min(lo, limit), max(hi, limit)
        if hi <= lo:
            lo, hi = lo - 0.5, hi + 0.5
        counts, edges = np.histogram(vals, bins=20, range=(lo, hi))
        for left, width, c in zip(edges[:-1], np.diff(edges), counts):
            if c:   # a bar: a band from 0 to its count
                ax.band([left, left + width * 0.9], [0, 0], [c, c], ACCENT, 0.85)
        ax.ylim = (0.0, float(counts.max()) * 1.15 + 0.5)
        if limit is not None:
            ax.line([limit, limit], [0.0, float(counts.max()) * 1.15 + 0.5], FAIL, width=1.2,
                    dash="4 3", label=f"limit {limit:g}")
            ax.legend = {"where": "upper right", "columns": 1}
    else:
        ax.note("no values", INK)
    return chart.svg()


def rejects_svg(runs: list[dict[str, Any]]) -> str:
    totals: dict[str, int] = {}
    for r in runs:
        for reason, n in (r.get("figures", {}).get("rejects") or {}).items():
            totals[reason] = totals.get(reason, 0) + int(n)
    chart = Chart(1, 1, 4.6, 2.4, 0.6, 0.15, 0.55, 0.35, 0.3, 0.2, INK, "#e3e0d8", "#8a949e",
                  PANEL)
    ax = chart.panels[0][0]
    ax.title = "Rejected joint states by reason (all bags)"
    if totals:
        reasons = sorted(totals, key=lambda k: -totals[k])
        for k, reason in enumerate(reasons):
            ax.band([k + 0.1, k + 0.9], [0, 0], [totals[reason]] * 2, FAIL, 0.8)
        ax.ylim = (0.0, max(totals.values()) * 1.15 + 0.5)
        ax.xlabel = " \u00b7 ".join(f"{i + 1}: {r.replace('_', ' ')} ({totals[r]})"
                                    for i, r in enumerate(reasons))
    else:
        ax.note("no joint state was rejected", INK)
    return chart.svg()


_CSS = f"""
body {{ margin: 0; background: {PAPER}; color: {INK};
  font: 14px/1.45 "DejaVu Sans", "Liberation Sans", sans-serif; }}
header {{ background: {INK}; color: {PAPER}; padding: 16px 28px; border-bottom: 5px solid
  {ACCENT}; }}
header h1 {{ margin: 0; font-size: 21px; }} header p {{ margin: 4px 0 0; opacity: .8; }}
main {{ max-width: 1100px; margin: 0 auto; padding: 16px 22px 36px; }}
section {{ background: {PANEL}; border: 1px solid #e3e0d8; margin: 0 0 16px; padding: 12px 16px; }}
h2 {{ font-size: 15px; margin: 0 0 8px; color: {ACCENT}; text-transform: uppercase;
  letter-spacing: .06em; }}
.three {{ display: grid; grid-template-columns: 1fr 1fr; gap: 12px; }}
figure {{ margin: 0; }} figure svg {{ width: 100%; height: auto; }}
table {{ border-collapse: collapse; width: 100%; font-size: 13px; }}
th, td {{ padding: 4px 7px; border-bottom: 1px solid #ece9e2; text-align: right; }}
th:first-child, td:first-child, td.text, th.text {{ text-align: left; }}
thead th {{ border-bottom: 2px solid {INK}; color: #56606a; font-size: 12px; }}
td.mark {{ border-left: 6px solid var(--mark); }}
.note {{ color: #56606a; font-size: 12px; }}
"""


def fleet_page(doc: dict[str, Any]) -> str:
    """fleet.html from the runs.json document."""
    runs = doc["runs"]
    th = doc["thresholds"]
    ok = [r for r in runs if r["ok"]]
    figs = [r["figures"] for r in ok]
    limits = ", ".join(f"{k} = {v}" for k, v in th.items() if v not in (None, False)) or "none"
    rows = []
    for r in runs:
        f = r.get("figures", {})
        verdict, colour = (("failed", FAIL) if not r["ok"] else
                           ("short", SHORT) if r.get("shortfalls") else ("pass", PASS))
        why = r["error"] if not r["ok"] else "; ".join(r.get("shortfalls") or [])
        rows.append(
            f'<tr><td class="mark text" style="--mark: {colour}">'
            f'{html.escape(Path(r["bag"]).name)}</td><td class="text">{verdict}</td>'
            f'<td>{_num(f.get("duration_s"))}</td><td>{_num(f.get("force_rmse_contact_N"))}</td>'
            f'<td>{_num(f.get("time_to_convergence_s"))}</td><td>{_num(f.get("converged"))}</td>'
            f'<td>{_num(f.get("samples_rejected"))}</td><td>{_num(f.get("final_state"))}</td>'
            f'<td class="text">{html.escape(why or "")}</td></tr>')
    short = [r for r in runs if r["ok"] and r.get("shortfalls")]
    short_list = ("".join(f"<li><b>{html.escape(Path(r['bag']).name)}</b>: "
                          f"{html.escape('; '.join(r['shortfalls']))}</li>" for r in short)
                  or "<li>none</li>")
    failed_list = ("".join(f"<li><b>{html.escape(Path(r['bag']).name)}</b>: "
                           f"{html.escape(r['error'] or '')}</li>" for r in runs if not r["ok"])
                   or "<li>none</li>")
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Fleet replay \u2014 {len(runs)} bags</title><style>{_CSS}</style></head><body>",
        f"<header><h1>Fleet replay \u2014 {len(runs)} bags</h1>"
        f"<p>{html.escape(doc['engine'])} \u00b7 {len(ok)} replayed, {doc['failed']} failed, "
        f"{doc['short']} short of the limits ({html.escape(limits)}) \u00b7 "
        f"{doc['wall_time_s']:.1f} s</p></header><main>",
        '<section id="short"><h2>Short of the limits</h2><ul>', short_list, "</ul>",
        '<h2>Failed</h2><ul id="failed">', failed_list, "</ul></section>",
        '<section><h2>Distributions</h2><div class="three">',
        '<figure id="fig-rmse">', histogram_svg([f.get("force_rmse_contact_N") for f in figs],
                                                "Force RMSE in contact", "N",
                                                th.get("max_force_rmse_contact_N")), "</figure>",
        '<figure id="fig-convergence">',
        histogram_svg([f.get("time_to_convergence_s") for f in figs],
                      "Time to convergence after contact", "s",
                      th.get("max_time_to_convergence_s")), "</figure>",
        '<figure id="fig-rejects">', rejects_svg(ok), "</figure>",
        "</div></section>",
        '<section><h2>Bags</h2><table id="bags"><thead><tr><th>Bag</th>'
        '<th class="text">Verdict</th>'
        "<th>Duration (s)</th><th>Force RMSE in contact (N)</th><th>Convergence (s)</th>"
        "<th>Converged</th><th>Rejected</th><th>Final state</th><th class=\"text\">Why</th>"
        "</tr></thead>"
        "<tbody>", *rows, "</tbody></table>",
        '<p class="note">Each bag\'s own report is report.html in its folder; every figure '
        "here is in runs.json. The estimates are not a safety function.</p></section>",
        "</main></body></html>",
    ]
    return "\n".join(parts) + "\n"
