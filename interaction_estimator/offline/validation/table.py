"""The validation table: pooled statistics of the scored episodes, side by side for the
estimator, the batch least-squares fit and the naive recursive least squares, with issue 17's
targets and a PASS/FAIL per target line."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...core.environment import PARAMETER_NAMES

TARGETS = {
    "median_error": 0.015,
    "p95_error": 0.05,
    "ratio_to_batch": 1.5,
    "converged_end": 0.98,
    "time_to_convergence": 3.0,
    "nonexcited_converged": 0.01,
    "inside3": 0.95,
    "nees_inside": 0.90,
    "reconverge": 3.0,
}


@dataclass
class Line:
    label: str
    estimator: str
    batch: str = ""
    rls: str = ""
    target: str = ""
    verdict: str = ""  # PASS, FAIL or "" (no target)


def _pct(x: float | None, digits: int = 1) -> str:
    if x is None or math.isnan(x):
        return "-"
    return "inf" if math.isinf(x) else f"{100 * x:.{digits}f} %"


def _sec(x: float | None) -> str:
    if x is None or math.isnan(x):
        return "-"
    return "never" if math.isinf(x) else f"{x:.2f} s"


def _quantile(values, q: float) -> float:
    v = np.asarray([x for x in values if not (isinstance(x, float) and math.isnan(x))], float)
    if len(v) == 0:
        return math.nan
    return (
        float(np.quantile(v, q, method="inverted_cdf"))
        if np.isinf(v).any()
        else float(np.quantile(v, q))
    )


def _share(flags) -> float:
    flags = list(flags)
    return float(np.mean(flags)) if flags else math.nan


def _verdict(value: float, target: float, at_most: bool) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "FAIL"
    return "PASS" if (value <= target if at_most else value >= target) else "FAIL"


def build_table(results: list[dict]) -> tuple[list[Line], dict]:
    """Lines of the table and a dict of the figures behind them (for JSON output and tests)."""
    episodes = [ep for r in results for ep in r.get("episodes", [])]
    failed = [r for r in results if "error" in r]
    full = [ep for ep in episodes if all(ep["identifiable"])]
    lines: list[Line] = []
    fig: dict = {
        "runs": len(results),
        "failed_runs": len(failed),
        "episodes": len(episodes),
        "fully_excited": len(full),
    }
    robots = sorted({r["spec"]["robot"] for r in results if "spec" in r})
    lines.append(
        Line(f"runs / failed to run ({', '.join(robots)})", f"{len(results)} / {len(failed)}")
    )
    excited4 = sum(all(ep["excited"]) for ep in episodes)
    lines.append(
        Line(
            "episodes (contacts with one object) / motion excites all four / "
            "all four identifiable given the force",
            f"{len(episodes)} / {excited4} / {len(full)}",
        )
    )

    def errors(method, eps, params=range(4)):
        return [ep[method]["error"][i] for ep in eps for i in params]

    # --- accuracy on fully excited episodes ---------------------------------------------
    med = {m: _quantile(errors(m, full), 0.5) for m in ("estimator", "batch", "rls")}
    p95 = {m: _quantile(errors(m, full), 0.95) for m in ("estimator", "batch", "rls")}
    fig["median_error"], fig["p95_error"] = med, p95
    lines.append(
        Line(
            "all four identifiable: median error (4 parameters pooled)",
            _pct(med["estimator"], 2),
            _pct(med["batch"], 2),
            _pct(med["rls"], 2),
            "<= 1.5 %",
            _verdict(med["estimator"], TARGETS["median_error"], True),
        )
    )
    lines.append(
        Line(
            "all four identifiable: 95th percentile error",
            _pct(p95["estimator"], 2),
            _pct(p95["batch"], 2),
            _pct(p95["rls"], 2),
            "<= 5 %",
            _verdict(p95["estimator"], TARGETS["p95_error"], True),
        )
    )
    for i, name in enumerate(PARAMETER_NAMES):
        m_i = {m: _quantile(errors(m, full, [i]), 0.5) for m in ("estimator", "batch", "rls")}
        q_i = {m: _quantile(errors(m, full, [i]), 0.95) for m in ("estimator", "batch", "rls")}
        lines.append(
            Line(
                f"  {name}: median / 95th percentile error",
                f"{_pct(m_i['estimator'], 2)} / {_pct(q_i['estimator'], 1)}",
                f"{_pct(m_i['batch'], 2)} / {_pct(q_i['batch'], 1)}",
                f"{_pct(m_i['rls'], 2)} / {_pct(q_i['rls'], 1)}",
            )
        )
    oracle = [ep["oracle_error"][i] for ep in full for i in range(4)]
    lines.append(
        Line(
            "  reference: fit of the estimator's force on MuJoCo's kinematics",
            "",
            f"{_pct(_quantile(oracle, 0.5), 2)} / {_pct(_quantile(oracle, 0.95), 1)}",
        )
    )
    no_rows = sum(any(math.isnan(x) for x in ep["batch"]["error"]) for ep in full)
    if no_rows:
        lines.append(Line("  episodes without filter rows (no batch fit)", "", str(no_rows)))
    for key, label in (
        ("median", "median error / batch fit's"),
        ("p95", "95th pct error / batch fit's"),
    ):
        src = med if key == "median" else p95
        ratio = src["estimator"] / src["batch"] if src["batch"] and src["batch"] > 0 else math.nan
        rls_ratio = src["rls"] / src["batch"] if src["batch"] and src["batch"] > 0 else math.nan
        fig[f"ratio_{key}"] = ratio
        lines.append(
            Line(
                f"all four identifiable: {label}",
                f"{ratio:.2f}x",
                "1.00x",
                f"{rls_ratio:.2f}x",
                "<= 1.5x",
                _verdict(ratio, TARGETS["ratio_to_batch"], True),
            )
        )
    conv_end = {m: _share(ep[m]["converged_end"] for ep in full) for m in ("estimator", "rls")}
    fig["converged_end"] = conv_end
    lines.append(
        Line(
            "all four identifiable: converged at the end",
            _pct(conv_end["estimator"]),
            "",
            _pct(conv_end["rls"]),
            ">= 98 %",
            _verdict(conv_end["estimator"], TARGETS["converged_end"], False),
        )
    )
    ttc = {
        m: _quantile([ep[m]["time_to_convergence"] for ep in full if ep["kind"] == "first"], 0.5)
        for m in ("estimator", "rls")
    }
    fig["time_to_convergence"] = ttc
    lines.append(
        Line(
            "all four identifiable: median time to convergence after contact",
            _sec(ttc["estimator"]),
            "",
            _sec(ttc["rls"]),
            "<= 3 s",
            _verdict(ttc["estimator"], TARGETS["time_to_convergence"], True),
        )
    )
    # --- verdicts on what is not excited ------------------------------------------------
    nonexc = {
        m: (
            sum(ep[m]["nonexcited_converged"] for ep in episodes)
            / max(1, sum(ep[m]["nonexcited_samples"] for ep in episodes))
        )
        for m in ("estimator", "rls")
    }
    n_nonexc = sum(len(ep["excited"]) - sum(ep["excited"]) for ep in episodes)
    fig["nonexcited_converged"] = nonexc
    lines.append(
        Line(
            f"not excited ({n_nonexc} episode-parameters): reported converged, % of samples",
            _pct(nonexc["estimator"], 2),
            "",
            _pct(nonexc["rls"], 2),
            "<= 1 %",
            _verdict(nonexc["estimator"], TARGETS["nonexcited_converged"], True),
        )
    )
    # --- consistency ---------------------------------------------------------------------
    fig["inside3"] = {}
    for i, name in enumerate(PARAMETER_NAMES):
        share = {}
        for m in ("estimator", "rls"):
            inside = sum(ep[m]["inside3"][i] for ep in episodes)
            total = sum(ep[m]["converged_samples"][i] for ep in episodes)
            share[m] = inside / total if total else math.nan
        fig["inside3"][name] = share
        batch_share = _share(ep["batch"]["inside3"][i] for ep in full)
        lines.append(
            Line(
                f"truth inside +/- 3 std, converged samples: {name}",
                _pct(share["estimator"]),
                f"{_pct(batch_share)} (end)",
                _pct(share["rls"]),
                ">= 95 %",
                _verdict(share["estimator"], TARGETS["inside3"], False),
            )
        )
    nees = {}
    for m in ("estimator", "rls"):
        checks = [ep[m]["nees"] for ep in episodes if ep[m]["nees"] is not None]
        nees[m] = (
            _share(c["inside"] for c in checks),
            len(checks),
            _share(c["value"] < c["lo"] for c in checks),
            _share(c["value"] > c["hi"] for c in checks),
        )
    fig["nees"] = nees
    lines.append(
        Line(
            "average NEES inside its chi-square bounds, % of episodes",
            f"{_pct(nees['estimator'][0])} of {nees['estimator'][1]}",
            "",
            f"{_pct(nees['rls'][0])} of {nees['rls'][1]}",
            ">= 90 %",
            _verdict(nees["estimator"][0], TARGETS["nees_inside"], False),
        )
    )
    lines.append(
        Line(
            "  below / above the bounds (too cautious / overconfident)",
            f"{_pct(nees['estimator'][2])} / {_pct(nees['estimator'][3])}",
            "",
            f"{_pct(nees['rls'][2])} / {_pct(nees['rls'][3])}",
        )
    )
    # --- against the naive RLS ----------------------------------------------------------
    beats_err = med["estimator"] <= med["rls"] and p95["estimator"] <= p95["rls"]
    lines.append(
        Line(
            "beats the naive RLS on error (median and 95th pct)",
            "yes" if beats_err else "no",
            "",
            "",
            "beat",
            "PASS" if beats_err else "FAIL",
        )
    )
    est_in = [fig["inside3"][n]["estimator"] for n in PARAMETER_NAMES]
    rls_in = [fig["inside3"][n]["rls"] for n in PARAMETER_NAMES]
    gap_est = (
        np.nanmean([abs(x - 0.9973) for x in est_in])
        if not all(map(math.isnan, est_in))
        else math.inf
    )
    gap_rls = (
        np.nanmean([abs(x - 0.9973) for x in rls_in])
        if not all(map(math.isnan, rls_in))
        else math.inf
    )
    beats_cons = (nees["estimator"][0] >= nees["rls"][0]) and gap_est <= gap_rls
    lines.append(
        Line(
            "beats the naive RLS on consistency (NEES share, 3-std coverage)",
            "yes" if beats_cons else "no",
            "",
            "",
            "beat",
            "PASS" if beats_cons else "FAIL",
        )
    )
    # --- changes ---------------------------------------------------------------------------
    after = [ep for ep in episodes if ep["kind"] != "first" and all(ep["identifiable"])]
    reconv = _quantile([ep["estimator"]["time_to_convergence"] for ep in after], 0.5)
    fig["reconverge"] = reconv
    lines.append(
        Line(
            f"after an object change ({len(after)}, all four identifiable): median "
            "time to converge again",
            _sec(reconv),
            "",
            _sec(_quantile([ep["rls"]["time_to_convergence"] for ep in after], 0.5)),
            "<= 3 s",
            _verdict(reconv, TARGETS["reconverge"], True),
        )
    )
    after_err = {m: _quantile(errors(m, after), 0.5) for m in ("estimator", "batch", "rls")}
    lines.append(
        Line(
            "  after a change: median error",
            _pct(after_err["estimator"], 2),
            _pct(after_err["batch"], 2),
            _pct(after_err["rls"], 2),
        )
    )
    # --- partly excited --------------------------------------------------------------------
    part = [ep for ep in episodes if any(ep["identifiable"]) and not all(ep["identifiable"])]
    part_err = {
        m: [ep[m]["error"][i] for ep in part for i in range(4) if ep["identifiable"][i]]
        for m in ("estimator", "batch", "rls")
    }
    lines.append(
        Line(
            f"partly identifiable ({len(part)}): those parameters' median / 95th pct",
            f"{_pct(_quantile(part_err['estimator'], 0.5), 2)} / "
            f"{_pct(_quantile(part_err['estimator'], 0.95), 1)}",
            f"{_pct(_quantile(part_err['batch'], 0.5), 2)} / "
            f"{_pct(_quantile(part_err['batch'], 0.95), 1)}",
            f"{_pct(_quantile(part_err['rls'], 0.5), 2)} / "
            f"{_pct(_quantile(part_err['rls'], 0.95), 1)}",
        )
    )
    # --- the estimator's other figures ---------------------------------------------------
    levels = np.sum([ep["levels"] for ep in episodes], axis=0) if episodes else np.zeros(4)
    total = max(1, int(np.sum([ep["samples"] for ep in episodes])))
    fig["levels"] = (levels / total).tolist()
    lines.append(
        Line(
            "status level during contact: OK / WARN / ERROR / STALE",
            " / ".join(f"{100 * x / total:.0f}" for x in levels) + " %",
        )
    )
    felt = [ep for ep in episodes if ep["felt"]]
    rmse = [ep["force_rmse"] / ep["force_peak"] for ep in felt]
    fig["force_rmse_of_peak"] = (_quantile(rmse, 0.5), _quantile(rmse, 0.95))
    lines.append(
        Line(
            f"felt contacts ({len(felt)}): force along u, RMSE / peak, median / 95th pct",
            f"{_pct(_quantile(rmse, 0.5))} / {_pct(_quantile(rmse, 0.95))}",
        )
    )
    first = [ep for ep in felt if ep["kind"] != "after_step"]
    onset = [ep["onset_delay"] for ep in first]
    missed = [ep["seed"] for ep in first if math.isinf(ep["onset_delay"])]
    fig["contact_never_found"] = missed
    lines.append(
        Line(
            "felt contacts found after attachment: median / 95th pct / never",
            f"{_sec(_quantile(onset, 0.5))} / {_sec(_quantile(onset, 0.95))} / "
            f"{len(missed)} of {len(first)}",
        )
    )
    if missed:
        lines.append(
            Line(
                "  felt contacts never found, seeds",
                " ".join(map(str, missed[:12])) + (" ..." if len(missed) > 12 else ""),
            )
        )
    for r in failed:
        lines.append(Line(f"run {r['seed']} failed", r["error"][:70]))
    return lines, fig


def render(lines: list[Line]) -> str:
    """Plain-text table, one line per figure."""
    head = Line("figure", "estimator", "batch LS", "naive RLS", "target", "")
    w = [
        max(len(getattr(x, f)) for x in [head] + lines)
        for f in ("label", "estimator", "batch", "rls", "target", "verdict")
    ]
    out = []
    for i, x in enumerate([head] + lines):
        out.append(
            "  ".join(
                getattr(x, f).ljust(w[j])
                for j, f in enumerate(("label", "estimator", "batch", "rls", "target", "verdict"))
            ).rstrip()
        )
        if i == 0:
            out.append("-" * len(out[0]))
    return "\n".join(out)
