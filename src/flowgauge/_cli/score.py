"""``flowgauge score``, ``flowgauge baseline`` and ``flowgauge demo``: parse, call the library, print."""

from __future__ import annotations

import tempfile
from pathlib import Path

import click
from rich import box
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.markup import escape
from rich.table import Table

from ._common import console, err_console, fmt_num, fmt_pct, short_hash, shown, table

__all__ = ["score", "baseline", "demo"]


def _fmt(x, decimals: int = 2) -> str:
    return fmt_num(x, decimals)


def _pct(x) -> str:
    return fmt_pct(x)


# violation family key -> (words, unit) for the console; an unknown key is shown with spaces
_QUANTITY = {"active_power_mw": ("active power", "MW"), "reactive_power_mvar": ("reactive power", "MVAr"),
             "voltage_pu": ("voltage", "p.u."), "angle_deg": ("angle difference", "deg"),
             "thermal_pct": ("thermal", "% of rating"), "thermal_mva": ("thermal", "MVA"),
             "balance_mw": ("active balance", "MW"), "balance_mvar": ("reactive balance", "MVAr")}
_CAUSE_WORDS = {"active_power": "active power limits", "reactive": "reactive power limits",
                "voltage": "voltage limits", "thermal": "thermal limits", "angle": "angle limits",
                "diverged": "power flow did not converge",
                "switching": "reactive-limit switching did not settle"}


def _family_label(key: str) -> tuple[str, int]:
    """("restored voltage violation, p.u.", decimals) for a violation family key."""
    stage, _, quantity = key.partition("_")
    words, unit = _QUANTITY.get(quantity, (quantity.replace("_", " "), ""))
    where = {"raw": "predicted", "restored": "restored"}.get(stage, stage)
    return f"{where} {words} violation" + (f", {unit}" if unit else ""), 4 if unit == "p.u." else 2


def _summary_table(card) -> Table:
    a = card.aggregates
    h = card.header
    t = table(title=f"{shown(h['split']['network'])} / {shown(h['split']['split'])}: "
                    f"{shown(h['model'].get('name', ''), 60)}",
              caption="violations: share of samples / largest violation; lower is better,\n"
                      "but gaps (optimality gaps): closer to 0 is better")
    t.add_column("metric")
    t.add_column("value", justify="right", no_wrap=True)
    ci = a["ci95"]["restoration_failure_rate"]
    t.add_row("samples", f"{a['samples']:,}")
    if a.get("solved_share") is not None:  # profiles with grading: the headline first
        sci = (a.get("ci95_graded") or {}).get("solved_share")
        t.add_row(f"solved (within limits, gap within {a['solved_threshold_pct']:g} %)",
                  _pct(a["solved_share"]) + ("" if sci is None else f"  [{_pct(sci[0])}, {_pct(sci[1])}]"))
        sev = a["severity"]
        t.add_row("severity (mean/p95/max)",
                  f"{_fmt(sev['mean'], 3)} / {_fmt(sev['p95'], 3)} / {_fmt(sev['max'], 3)}")
        curve = a["tolerance_curve"]
        t.add_row("failing at " + "/".join(f"{m:g}" for m in curve["multiples"]) + "x tolerance",
                  " / ".join(_pct(f) for f in curve["failure_rate"]))
        t.add_row("generators held at a Q limit (mean)", _fmt(a["switched_generators"]["mean"]))
    t.add_row("restoration failure rate", _pct(a["restoration_failure_rate"])
              + ("" if ci is None else f"  [{_pct(ci[0])}, {_pct(ci[1])}]"))
    for cause, share in a["restoration_failure_causes"].items():
        if share:
            t.add_row(f"  failed: {_CAUSE_WORDS.get(cause, cause.replace('_', ' '))}", _pct(share))
    for key, label in (("raw_gap_pct", "gap of the prediction, %"), ("restored_gap_pct", "gap after restoration, %")):
        st = a[key]
        t.add_row(f"{label} (mean/p95/max)",
                  "-" if st is None else f"{_fmt(st['mean'])} / {_fmt(st['p95'])} / {_fmt(st['max'])}")
    for fam, v in a["violations"].items():
        if v is not None and v["max"] > 0:
            label, decimals = _family_label(fam)
            t.add_row(escape(label), f"{_pct(v['share'])} / {_fmt(v['max'], decimals)}")
    if a["inference_ms"] is not None:
        t.add_row("inference time, ms (mean, self-reported)", _fmt(a["inference_ms"]["mean"]))
    if a["speedup_indicative"] is not None:
        t.add_row("speed-up over the reference solver (indicative)", _fmt(a["speedup_indicative"]))
    return t


def default_scorecard_path(file: Path) -> Path:
    """FILE's name without its last suffix, then ``.scorecard.json``: m.v1.json ->
    m.v1.scorecard.json, x.scorecard.json -> x.scorecard.scorecard.json (never FILE itself)."""
    return file.with_name(f"{file.stem}.scorecard.json")


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or (a.exists() and b.exists() and a.samefile(b))
    except OSError:
        return False


def _refuse_overwriting_inputs(outputs: dict, inputs: list[Path]) -> None:
    """An output that is an input would destroy it (the scorecard written over the predictions)."""
    from ..errors import InputError

    seen: dict = {}
    for option, path in outputs.items():
        if path is None:
            continue
        for source in inputs:
            if _same_file(path, source):
                raise InputError(f"is an input of this run ({shown(source)}); choose another path",
                                 where=f"{option} {path}")
        for other, earlier in seen.items():
            if _same_file(path, earlier):
                raise InputError(f"is also given to {other}; choose two paths", where=f"{option} {path}")
        seen[option] = path


def _split_inputs(split_path) -> list[Path]:
    if split_path is None:
        return []
    folder = Path(split_path)
    return [folder, *folder.iterdir()] if folder.is_dir() else [folder]


class _LazyProgress:
    """A rich progress bar that appears with the first restoration chunk, so a file rejected
    by validation prints only its error message."""

    def __init__(self, label: str = "restoration power flows"):
        self._label = label
        self._bar = None
        self._task = None

    @property
    def running(self) -> bool:
        return self._bar is not None

    def __call__(self, done: int, total: int) -> None:
        if self._bar is None:
            self._bar = Progress(TextColumn(escape(self._label)), BarColumn(), MofNCompleteColumn(),
                                 TimeElapsedColumn(), console=err_console, transient=True)
            self._bar.start()
            self._task = self._bar.add_task("restore", total=total)
        self._bar.update(self._task, completed=done, total=total)

    def stop(self) -> None:
        if self._bar is not None:
            self._bar.stop()


@click.command()
@click.argument("file", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--split", "split_path", type=click.Path(path_type=Path), default=None,
              help="Split folder or NETWORK/SPLIT (default: found from the split hash in the file's header).")
@click.option("--out", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Scorecard path (default: FILE's name without its last suffix, then .scorecard.json: "
                   "m.v1.json gives m.v1.scorecard.json). Never one of the run's inputs.")
@click.option("--per-sample", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also write the per-sample table as Parquet here.")
@click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True,
              help="Local processes for the restoration power flows.")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Dask scheduler address to spread the restoration power flows over.")
@click.option("--profile", default="reactive-limits", show_default=True,
              help="Scoring profile: reactive-limits (restoration enforces reactive limits) or strict "
                   "(every PV bus held at its setpoint); docs/metrics.md.")
def score(file: Path, split_path, out, per_sample, workers: int, scheduler, profile: str) -> None:
    """Validate and score a predictions FILE; write a canonical JSON scorecard."""
    from ..scoring import score as score_predictions

    out = out if out is not None else default_scorecard_path(file)
    _refuse_overwriting_inputs({"--out": out, "--per-sample": per_sample}, [file, *_split_inputs(split_path)])
    bar = _LazyProgress()
    try:
        card = score_predictions(file, split_path, profile=profile, workers=workers, scheduler=scheduler,
                                 progress=bar)
    finally:
        bar.stop()
    if per_sample is not None:  # the scorecard last: it is the run's record of success
        card.write_per_sample(per_sample)
    card.write(out)
    console.print(_summary_table(card))
    console.print(f"scorecard {shown(out, 200)} (hash {short_hash(card.scorecard_hash)})", soft_wrap=True)


@click.command()
@click.argument("name")
@click.option("--split", "split_path", required=True, type=click.Path(path_type=Path),
              help="Split to predict: a split folder or NETWORK/SPLIT.")
@click.option("--out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Predictions file to write.")
@click.option("--train", "train_path", type=click.Path(path_type=Path), default=None,
              help="Training split: folder or NETWORK/SPLIT (default: the sibling train split, else the frozen one).")
@click.option("--format", "fmt", type=click.Choice(["json", "parquet"]), default="json", show_default=True,
              help="File format of the predictions written to --out (docs/submission.md).")
def baseline(name: str, split_path: Path, out: Path, train_path, fmt: str) -> None:
    """Write the predictions of baseline NAME (dc-opf, nearest, linear) for a split."""
    from ..baselines import write_baseline

    bar = _LazyProgress(f"baseline {name}: samples")
    try:
        write_baseline(name, split_path, out, train=train_path, format=fmt, progress=bar)
    finally:
        bar.stop()
    console.print(f"wrote {shown(out, 200)}")


@click.command()
@click.option("--workdir", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Keep the predictions (and built splits) here (default: a temporary folder).")
@click.option("--samples", type=click.IntRange(min=2), default=None,
              help="Samples per split for splits the demo builds (when no frozen split exists).")
def demo(workdir, samples) -> None:
    """Run the baselines on the demo network, score them and compare."""
    from ..baselines import run_demo

    bar = _LazyProgress("demo: baselines scored")

    def run(folder: Path):
        try:
            return run_demo(folder, samples=samples, progress=bar,
                            say=lambda msg: None if bar.running else err_console.print(f"[dim]{escape(msg)}[/dim]"))
        finally:
            bar.stop()

    if workdir is None:
        with tempfile.TemporaryDirectory(prefix="flowgauge-demo-") as tmp:
            result = run(Path(tmp))
    else:
        result = run(workdir)
    kinds = sorted(set(result.sources.values()))
    t = Table(title=f"demo network, {' and '.join(kinds)} splits", header_style="bold", box=box.SIMPLE_HEAD,
              pad_edge=False, show_edge=False, padding=(0, 1),
              caption="solved: within limits after restoration and cost within 1 % (higher is\n"
                      "better); failure rate and severity: lower is better; gap (restored): closer to 0")
    for col in ("baseline", "split", "samples", "solved", "failure\nrate", "main\ncause", "mean\nseverity",
                "gap %"):
        t.add_column(col, justify="left" if col in ("baseline", "split", "main\ncause") else "right", no_wrap=True)
    for (name, split), card in result.scorecards.items():
        a = card.aggregates
        rg = a["restored_gap_pct"]
        causes = sorted(((v, c) for c, v in a["restoration_failure_causes"].items() if v > 0), reverse=True)
        t.add_row(name, split, str(a["samples"]), _pct(a.get("solved_share")), _pct(a["restoration_failure_rate"]),
                  causes[0][1] if causes else "-", _fmt((a.get("severity") or {}).get("mean"), 3),
                  "-" if rg is None else _fmt(rg["mean"], 3))
    console.print(t)
