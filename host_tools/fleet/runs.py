"""Fleet runs on a Dask client: replay (or review) and train every gateway of a fleet folder.

Entry points: replay_fleet(client, fleet, out, since, until, review, reports, quiet),
compare_fleet(client, fleet, candidates, out, since, until, quiet) and train_fleet(client, fleet,
out, target, quiet); each writes into folder `out` and returns
(the JSON document written, summary lines). What they write is described with the `edgevib fleet`
command (host_tools.commands.fleet), which, like `edgevib demo --fleet`, calls them.
"""
from __future__ import annotations

import json
import re
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

# --- the runs --------------------------------------------------------------------------------------

def replay_fleet(client, fleet: Path, out: Path, since: float | None, until: float | None, review: bool,
                 reports: bool, quiet: bool = False) -> tuple[dict, list[str]]:
    """Replay (and with `review`, review) every gateway into folder out; (JSON document, lines)."""
    from host_tools.fleet import engine, layout, page, work
    from host_tools.fleet import review as rv
    from host_tools.twin import replay
    from host_tools.data.recording import atomic_write

    plans = plan(client, fleet, quiet, since_s=since, until_s=until, healthy=review)
    live = [w for w in plans if w.error is None and w.chunks]
    for w in plans:
        if w.error is None and not w.chunks:
            w.error = f"{w.folder / layout.ARCHIVE}: no recordings in the period"
    origin = _origin(live)
    track = replay.TRACK_COLUMNS + ("zone",)
    watched, final = [], {}
    for w in live:
        feats, res = work.submit_replay(client, w, columns=track)
        watched += feats + [res]
        link = rep = None
        if reports:
            rep = client.submit(work.write_pump_report, str(out / _safe(w.gateway) / "report"), res, w.params)
            watched.append(rep)
            link = f"{_safe(w.gateway)}/report/index.html"
        if review:
            healthy = None
            if w.healthy_chunks:
                hf, healthy = work.submit_replay(client, w, kind="healthy", columns=track)
                watched += hf + [healthy]
            dig = client.submit(rv.digest, res, healthy, work.review_info(w, link), origin)
            watched.append(dig)
            final[w.gateway] = (res, dig, rep)
        else:
            final[w.gateway] = (res, None, rep)
    engine.watch(watched, "fleet " + ("review" if review else "replay"), quiet)

    gateways: dict[str, Any] = {}
    errors: dict[str, str] = {w.gateway: w.error for w in plans if w.error}
    rows = [rv.error_row(work.review_info(w, None), w.error) for w in plans if w.error]
    samples = 0
    for w in live:
        res, dig, rep = final[w.gateway]
        why = engine.failure(res) or (engine.failure(dig) if dig is not None else None) or \
            (engine.failure(rep) if rep is not None else None)
        if why:
            errors[w.gateway] = why
            rows.append(rv.error_row(work.review_info(w, None), why))
            continue
        r = res.result()
        samples += w.samples
        gateways[w.gateway] = {"summary": r.summary["streams"][w.gateway], "events": r.events,
                               "recordings": len(r.recordings[0])}
        if dig is not None:
            rows.append(dig.result())
    doc: dict[str, Any] = {"fleet": layout.read_fleet(fleet).get("name"), "samples": samples,
                           "gateways": gateways, "errors": errors}
    if review:
        doc["rows"] = page.ordered(rows)
        meta = {"name": doc["fleet"], "origin_s": origin, "period": _period(rows),
                "created": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")}
        files, html = page.render(rows, meta)
        for name, data in files.items():
            atomic_write(out / name, data)
        atomic_write(out / "index.html", html.encode())
        atomic_write(out / "review.json", (json.dumps(doc, indent=1) + "\n").encode())
        lines = [_row_line(r) for r in doc["rows"]]
    else:
        atomic_write(out / "replay.json", (json.dumps(doc, indent=1) + "\n").encode())
        lines = [_replay_line(g, gateways[g]) for g in sorted(gateways)] + \
                [f"{g}: ERROR {e}" for g, e in sorted(errors.items())]
    lines.append(f"{len(gateways)} of {len(plans)} gateways replayed ({samples / 1e6:.1f} M samples)"
                 + (f"; {len(errors)} with errors" if errors else ""))
    lines.append("advisory condition monitoring, not machinery protection; no alert is no guarantee of health")
    return doc, lines


def compare_fleet(client, fleet: Path, candidates: Path, out: Path, since: float | None, until: float | None,
                  quiet: bool = False) -> tuple[dict, list[str]]:
    """Per gateway, its set in use against the candidate candidates/<gateway>/params.msgpack over
    its archive: out/<gateway>/compare/index.html, and out/compare.json; (JSON document, lines).
    Feature tasks are shared by the two sets when their features are the same."""
    from host_tools.data.analysis import profile_for_set
    from host_tools.data.files import expected_rate, load_body
    from host_tools.fleet import engine, layout, work
    from host_tools.twin.compare import SetUnderTest
    from host_tools.twin.replay import TRACK_COLUMNS
    from host_tools.data.recording import atomic_write
    from host_tools.errors import EdgevibError

    plans = plan(client, fleet, quiet, since_s=since, until_s=until)
    futs, watched = {}, []
    for w in plans:
        if w.error is None and not w.chunks:
            w.error = f"{w.folder / layout.ARCHIVE}: no recordings in the period"
        if w.error:
            continue
        cand = candidates / w.gateway / layout.PARAMS
        try:
            if not cand.is_file():
                raise EdgevibError(f"{cand}: no candidate set for this gateway")
            _, new = load_body(cand)
            new_profile = profile_for_set(new, work.BOARDS / f"{w.manifest.board}.json")
        except EdgevibError as e:
            w.error = str(e)
            continue
        sets = [SetUnderTest("in use", w.params, w.profile, expected_rate(w.folder / layout.PARAMS)),
                SetUnderTest("candidate", new, new_profile, expected_rate(cand))]
        res = []
        for s in sets:
            feats, r = work.submit_replay(client, w, s.params, columns=TRACK_COLUMNS, profile=s.profile)
            watched += feats + [r]
            res.append(r)
        futs[w.gateway] = client.submit(work.compare_gateway, str(out / _safe(w.gateway) / "compare"), res, sets)
        watched.append(futs[w.gateway])
    engine.watch(watched, "fleet compare", quiet)
    done, errors = _settle(plans, futs)
    doc = {"fleet": layout.read_fleet(fleet).get("name"), "candidates": str(candidates),
           "gateways": {g: d["comparison"] for g, d in done.items()}, "errors": errors}
    out.mkdir(parents=True, exist_ok=True)
    atomic_write(out / "compare.json", (json.dumps(doc, indent=1) + "\n").encode())
    lines = [f"{g}: {d['line'].removeprefix('compare: ')}" for g, d in sorted(done.items())]
    lines += [f"{g}: ERROR {e}" for g, e in sorted(errors.items())]
    lines.append(f"{len(done)} of {len(plans)} gateways compared; a page per gateway in <out>/<gateway>/compare/; "
                 "nothing was flashed")
    return doc, lines


def train_fleet(client, fleet: Path, out: Path, target: float, quiet: bool = False) -> tuple[dict, list[str]]:
    """Train a set per gateway from its healthy/ recordings into out/<gateway>/; (JSON document, lines)."""
    from host_tools.fleet import engine, layout, work
    from host_tools.data.recording import atomic_write
    from host_tools.twin.replay import stated_rate

    plans = plan(client, fleet, quiet, need_params=False, healthy=True)
    futs = {}
    for w in plans:
        if w.error is None:
            paths = w.healthy_paths
            version = (w.params["version"] + 1) if w.params else 1
            futs[w.gateway] = client.submit(work.train_gateway, w.gateway, paths, w.profile, str(out / _safe(w.gateway)),
                                            target, version, w.manifest.bearing, key=f"train-{w.gateway}")
    engine.watch(list(futs.values()), "fleet train", quiet)
    done, errors = _settle(plans, futs)
    doc = {"fleet": layout.read_fleet(fleet).get("name"), "target_false_alerts_per_30_days": target,
           "gateways": done, "errors": errors}
    out.mkdir(parents=True, exist_ok=True)        # also when every gateway failed
    atomic_write(out / "train.json", (json.dumps(doc, indent=1) + "\n").encode())
    lines = []
    for g, d in sorted(done.items()):
        exp = d["expected_false_alerts_per_30_days"]
        lines.append(f"{g}: version {d['version']}, {d['modes']} modes, alert {d['alert']:.2f}, alarm {d['alarm']:.2f} spreads"
                     + ("" if exp is None else f", expected {stated_rate(exp, bool(d.get('upper_bound')))} "
                                               "false alerts per 30 days")
                     + (f"; {len(d['warnings'])} warning(s)" if d["warnings"] else ""))
    lines += [f"{g}: ERROR {e}" for g, e in sorted(errors.items())]
    lines.append(f"{len(done)} of {len(plans)} gateways trained, each into <out>/<gateway>/params.msgpack; "
                 "the sets on the gateways are unchanged")
    return doc, lines


def plan(client, fleet: Path, quiet: bool, **options: Any) -> list:
    """Every gateway of the fleet read and checked, one planning task per gateway (host_tools.fleet.work.plan_gateway)."""
    from host_tools.fleet import engine, layout, work

    folders = layout.gateways(fleet)
    futs = [client.submit(work.plan_gateway, str(f), pure=False, **options) for f in folders]
    engine.watch(futs, "fleet planning", quiet)
    out = []
    for f, fut in zip(folders, futs):
        why = engine.failure(fut)
        out.append(work.GatewayWork(f.name, f, error=why) if why else fut.result())
    return out


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name)


def _origin(live) -> float:
    """Day 0 of the page's plots: 00:00 UTC of the day of the earliest recording replayed."""
    from host_tools.fleet.layout import date_t_s
    firsts = [float(w.chunks[0].chunks[0][1][0]) for w in live]
    t = min(firsts) if firsts else 0.0
    return date_t_s(datetime.fromtimestamp(t, timezone.utc).date())


def _period(rows: list[dict]) -> str:
    ok = [r for r in rows if not r.get("error")]
    if not ok:
        return "nothing replayed"
    fmt = "%Y-%m-%d %H:%M UTC"
    a = min(r["t_first_s"] for r in ok)
    b = max(r["t_last_s"] for r in ok)
    return (f"{datetime.fromtimestamp(a, timezone.utc).strftime(fmt)} to "
            f"{datetime.fromtimestamp(b, timezone.utc).strftime(fmt)}")


def _replay_line(g: str, d: dict) -> str:
    s = d["summary"]
    return (f"{g}: {d['recordings']} recordings, {s['windows']} windows; "
            f"{s['alerts']} alerts, {s['alarms']} alarms, {s['sensor_faults']} sensor faults")


def _row_line(r: dict) -> str:
    from host_tools.fleet.review import SEVERITIES
    head = f"{SEVERITIES[r['severity']]:<10} {r['gateway']}"
    if r.get("error"):
        return f"{head}: ERROR {r['error']}"
    return f"{head}: {r['pump']} ({r['site']}): " + ("; ".join(r["reasons"]) or f"{r['state_now']} now, nothing to note")


def _settle(plans, futs) -> tuple[dict, dict]:
    """(results by gateway, one error line by gateway): planning errors, then failed futures."""
    from host_tools.fleet import engine

    errors = {w.gateway: w.error for w in plans if w.error}
    done = {}
    for g, f in futs.items():
        why = engine.failure(f)
        if why:
            errors[g] = why
        else:
            done[g] = f.result()
    return done, errors
