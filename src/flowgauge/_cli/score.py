"""``flowgauge score``, ``flowgauge baseline`` and ``flowgauge demo``: parse, call the library, print."""

from __future__ import annotations

import tempfile
from pathlib import Path

import click
from rich import box
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from ._common import console, err_console

__all__ = ["score", "baseline", "demo"]


def _fmt(x, digits: int = 4) -> str:
    return "-" if x is None else f"{x:.{digits}g}"


def _pct(x) -> str:
    return "-" if x is None else f"{100 * x:.1f}%"


def _summary_table(card) -> Table:
    a = card.aggregates
    h = card.header
    t = Table(title=f"{h['split']['network']} / {h['split']['split']}: {h['model'].get('name', '')}",
              show_header=True, header_style="bold", caption="lower is better; gaps: closer to 0 is better")
    t.add_column("metric")
    t.add_column("value", justify="right")
    ci = a["ci95"]["restoration_failure_rate"]
    t.add_row("samples", str(a["samples"]))
    t.add_row("restoration_failure_rate", _pct(a["restoration_failure_rate"])
              + ("" if ci is None else f"  [{_pct(ci[0])}, {_pct(ci[1])}]"))
    for cause, share in a["restoration_failure_causes"].items():
        if share:
            t.add_row(f"  cause {cause}", _pct(share))
    for key in ("raw_gap_pct", "restored_gap_pct"):
        s = a[key]
        t.add_row(f"{key} mean / p95 / max",
                  "-" if s is None else f"{_fmt(s['mean'])} / {_fmt(s['p95'])} / {_fmt(s['max'])}")
    for fam, v in a["violations"].items():
        if v is not None and v["max"] > 0:
            t.add_row(f"{fam}: share / max", f"{_pct(v['share'])} / {_fmt(v['max'])}")
    if a["inference_ms"] is not None:
        t.add_row("inference_ms mean (self-reported)", _fmt(a["inference_ms"]["mean"]))
    if a["speedup_indicative"] is not None:
        t.add_row("speed-up vs reference solver (indicative)", _fmt(a["speedup_indicative"], 3))
    return t


class _LazyProgress:
    """A rich progress bar that appears with the first restoration chunk, so a file rejected
    by validation prints only its error message."""

    def __init__(self):
        self._bar = None
        self._task = None

    def __call__(self, done: int, total: int) -> None:
        if self._bar is None:
            self._bar = Progress(TextColumn("restoration power flows"), BarColumn(), MofNCompleteColumn(),
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
              help="Scorecard path (default: FILE with the suffix .scorecard.json).")
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

    out = out if out is not None else file.with_name(file.name.split(".")[0] + ".scorecard.json")
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
    console.print(f"scorecard {out} (hash {card.scorecard_hash[:16]}...)", soft_wrap=True)


@click.command()
@click.argument("name")
@click.option("--split", "split_path", required=True, type=click.Path(path_type=Path),
              help="Split to predict: a split folder or NETWORK/SPLIT.")
@click.option("--out", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="Predictions file to write.")
@click.option("--train", "train_path", type=click.Path(path_type=Path), default=None,
              help="Training split: folder or NETWORK/SPLIT (default: the sibling train split, else the frozen one).")
@click.option("--format", "fmt", type=click.Choice(["json", "parquet"]), default="json", show_default=True)
def baseline(name: str, split_path: Path, out: Path, train_path, fmt: str) -> None:
    """Write the predictions of baseline NAME (dc-opf, nearest, linear) for a split."""
    from ..baselines import write_baseline

    write_baseline(name, split_path, out, train=train_path, format=fmt)
    console.print(f"wrote {out}")


@click.command()
@click.option("--workdir", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Keep the predictions (and built splits) here (default: a temporary folder).")
@click.option("--samples", type=click.IntRange(min=2), default=None,
              help="Samples per split for splits the demo builds (when no frozen split exists).")
def demo(workdir, samples) -> None:
    """Run the baselines on the demo network, score them and compare."""
    from ..baselines import run_demo

    def run(folder: Path):
        return run_demo(folder, samples=samples, say=lambda msg: err_console.print(f"[dim]{msg}[/dim]"))

    if workdir is None:
        with tempfile.TemporaryDirectory(prefix="flowgauge-demo-") as tmp:
            result = run(Path(tmp))
    else:
        result = run(workdir)
    kinds = sorted(set(result.sources.values()))
    t = Table(title=f"demo network, {' and '.join(kinds)} splits", header_style="bold", box=box.SIMPLE_HEAD,
              caption="failure rate: lower is better; gaps: closer to 0 is better")
    for col in ("baseline", "split", "samples", "failure\nrate", "main cause", "restored\ngap %", "raw\ngap %"):
        t.add_column(col, justify="left" if col in ("baseline", "split", "main cause") else "right", no_wrap=True)
    for (name, split), card in result.scorecards.items():
        a = card.aggregates
        rg = a["restored_gap_pct"]
        causes = sorted(((v, c) for c, v in a["restoration_failure_causes"].items() if v > 0), reverse=True)
        t.add_row(name, split, str(a["samples"]), _pct(a["restoration_failure_rate"]),
                  causes[0][1] if causes else "-",
                  "-" if rg is None else _fmt(rg["mean"], 3), _fmt(a["raw_gap_pct"]["mean"], 3))
    console.print(t)
