"""The combined outputs of a sweep, read back from its ensemble folders (so
that ensembles finished in an earlier run count like the others):

  ensembles.csv        one row per ensemble: ensemble, file, the labels, volume,
                       outcome (done | failed), failure, model, degree,
                       chi2_per_dof, horizon_mu, horizon_reason, ok_rows, rows
  sweep.csv            one row per ensemble and mu: ensemble, file, the labels,
                       volume, outcome, failure, then the columns of results.csv
                       (a failed ensemble: one row with its failure, mu empty)
  per_volume.csv       the labels, then the columns of delta_f.csv (Delta f per
                       volume and mu, for every group of two or more volumes)
  infinite_volume.csv  the labels, then the infinite-volume limit per mu
  report.html, fig_volumes[_GROUP].png/pdf   the page and the figures

All are written atomically into the sweep folder.
"""
import csv
import io
import json

from signfree.analysis.volumes import LIMIT_COLUMNS, POINT_COLUMNS, extrapolate, \
    points_from_records
from signfree.io.writing import csv_text, write_files

ENSEMBLES = "ensembles"      # the folder of the ensemble folders

ENSEMBLE_COLUMNS = ("model", "degree", "chi2_per_dof", "horizon_mu", "horizon_reason",
                    "ok_rows", "rows")


def _read_csv(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def _vtext(v):
    return "" if v is None else f"{float(v):.15g}"


def read_ensemble(folder):
    """(results records, summary dict, Delta f records or None) of a
    complete ensemble folder."""
    rows = _read_csv(folder / "results.csv")
    summary = json.loads((folder / "summary.json").read_text())
    df = folder / "delta_f.csv"
    return rows, summary, (_read_csv(df) if df.is_file() else None)


def combined_tables(result):
    """(ensembles records, sweep records and their columns, {group: [curves]},
    {group: [(volume or name, failure)]}) of a finished sweep."""
    manifest = result.manifest
    labels = list(manifest.label_names)
    base = result.out / ENSEMBLES
    ens_rows, sweep_rows, result_cols = [], [], []
    curves, missing = {}, {}
    for e in manifest.ensembles:
        key = {"ensemble": e.name, "file": e.file, **dict(e.labels)}
        group = e.group
        if result.outcomes[e.name] == "failed":
            failure = result.failures.get(e.name, "")
            rec = dict(key, volume=_vtext(e.volume), outcome="failed", failure=failure)
            ens_rows.append(rec)
            sweep_rows.append(dict(rec))
            missing.setdefault(group, []).append(
                (e.volume if e.volume is not None else e.name, failure))
            continue
        rows, summary, df = read_ensemble(base / e.name)
        volume = e.volume if e.volume is not None else summary.get("volume")
        head = dict(key, volume=_vtext(volume), outcome="done", failure="")
        info_h = summary.get("horizon") or {}
        statuses = summary.get("statuses") or {}
        chi2 = summary.get("chi2_per_dof")
        ens_rows.append(dict(head, model=summary.get("model", ""),
                             degree=summary.get("degree", ""),
                             chi2_per_dof="" if chi2 is None else f"{chi2:.4g}",
                             horizon_mu=_vtext(info_h.get("mu")),
                             horizon_reason=info_h.get("reason", ""),
                             ok_rows=str(statuses.get("ok", "")), rows=str(len(rows))))
        for r in rows:
            for c in r:
                if c not in result_cols:
                    result_cols.append(c)
            sweep_rows.append(dict(head, **r))
        if df is not None:
            curves.setdefault(group, []).append(points_from_records(df))
        else:
            missing.setdefault(group, []).append((e.name, "no volume known"))
    head_cols = ["ensemble", "file"] + labels + ["volume", "outcome", "failure"]
    return ens_rows, head_cols, result_cols, sweep_rows, curves, missing


def volume_limits(result, curves, missing, order):
    """{group: VolumeLimit} for every group of two or more volumes, and
    {group: note} for groups that could not be combined."""
    limits, notes = {}, {}
    groups = []
    for e in result.manifest.ensembles:
        if e.group not in groups:
            groups.append(e.group)
    for g in groups:
        have, lost = curves.get(g, []), missing.get(g, [])
        if len(have) + len(lost) < 2:
            continue
        if not have:
            notes[g] = "not combined: no ensemble of the group has a result"
            continue
        try:
            limits[g] = extrapolate(have, order, lost)
        except ValueError as exc:
            notes[g] = f"not combined: {exc}"
    return limits, notes


def write_combined(result, order="auto"):
    """Write the combined tables, the figures and report.html of a finished
    sweep into its folder; sets ``result.limits`` and ``result.files``."""
    from signfree.report.volumes import sweep_page, volume_figure_files
    ens_rows, head_cols, result_cols, sweep_rows, curves, missing = combined_tables(result)
    manifest = result.manifest
    labels = list(manifest.label_names)
    limits, notes = volume_limits(result, curves, missing, order)
    per_volume, infinite = [], []
    for g, limit in limits.items():
        key = dict(zip(labels, g))
        per_volume += [dict(key, **rec) for rec in limit.point_records()]
        infinite += [dict(key, **rec) for rec in limit.records()]
    files = {
        "ensembles.csv": csv_text(head_cols + list(ENSEMBLE_COLUMNS), ens_rows),
        "sweep.csv": csv_text(head_cols + result_cols, sweep_rows),
    }
    if limits:
        files["per_volume.csv"] = csv_text(labels + list(POINT_COLUMNS), per_volume)
        files["infinite_volume.csv"] = csv_text(labels + list(LIMIT_COLUMNS), infinite)
    figures = {}
    for g, limit in limits.items():
        name = "volumes" if not labels else f"volumes_{manifest.group_name(g)}"
        figures[g] = volume_figure_files(limit, _group_title(labels, g), name)
        files.update(figures[g])
    files["report.html"] = sweep_page(result, ens_rows, limits, notes, figures)
    write_files(result.out, files, force=True)  # the sweep's own folder
    result.limits = limits
    result.notes = notes
    result.files = sorted(files)
    return files


def _group_title(labels, group):
    return ", ".join(f"{k} = {v}" for k, v in zip(labels, group))


def table_text(records, columns):
    """A CSV table as aligned text (for a terminal)."""
    buf = io.StringIO()
    widths = [max(len(c), *(len(str(r.get(c, ""))) for r in records)) for c in columns]
    fmt = "  ".join("{:>%d}" % w for w in widths)
    buf.write(fmt.format(*columns) + "\n")
    for r in records:
        buf.write(fmt.format(*(str(r.get(c, "")) for c in columns)) + "\n")
    return buf.getvalue()
