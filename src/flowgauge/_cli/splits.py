"""``flowgauge splits``: build, verify, show and publish frozen splits; write recipes and
rebuild splits from them."""

from __future__ import annotations

import math
import time

import click
from rich.table import Table

from ..errors import InputError
from ._common import console, err_console, shown


def _split_names() -> list[str]:
    from ..splits._manifest import SPLIT_NAMES  # every split a design exists for
    return list(SPLIT_NAMES)


@click.group()
def splits() -> None:
    """Build, verify, show and publish frozen splits; write recipes and rebuild from them."""


class _Progress:
    """rich progress: samples solved and rejected, rate, time left."""

    def __init__(self, quiet: bool):
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn
        self.quiet = quiet
        self.bar = Progress(TextColumn("[bold]{task.description}"), BarColumn(), MofNCompleteColumn(),
                            TextColumn("rejected {task.fields[rejected]}"), TextColumn("{task.fields[rate]}"),
                            TimeRemainingColumn(), console=err_console, disable=quiet)
        self.task = None
        self.t0 = time.perf_counter()

    def __call__(self, p) -> None:
        if self.task is None:
            self.bar.start()
            self.task = self.bar.add_task("solved", total=p.total, rejected=p.rejected, rate="")
            self.t0 = time.perf_counter()
        dt = time.perf_counter() - self.t0
        new = p.solved - p.resumed
        rate = f"{new / dt:.2f} samples/s" if dt > 0 and new > 0 else ""
        self.bar.update(self.task, completed=p.solved, rejected=p.rejected, rate=rate)

    def stop(self) -> None:
        if self.task is not None:
            self.bar.stop()


@splits.command(short_help="Build a split of a network (resumable).")
@click.argument("network")
@click.option("--split", "split", required=True, type=click.Choice(_split_names()), help="Which split design to draw.")
@click.option("--samples", type=click.IntRange(min=1), required=True, help="Number of samples kept.")
@click.option("--seed", type=click.IntRange(min=0), required=True, help="Seed of every draw.")
@click.option("--out", "out", type=click.Path(file_okay=False), required=True, help="Folder to create.")
@click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True, help="Local worker processes.")
@click.option("--scheduler", default=None, help="Dask scheduler address (tcp://HOST:PORT) instead of local workers.")
@click.option("--chunk", type=click.IntRange(min=1), default=10, show_default=True, help="Samples per chunk.")
@click.option("--notes", default="", help="Text recorded in the manifest's notes.")
@click.option("--quiet", is_flag=True, help="No progress bar.")
@click.option("--fresh", is_flag=True,
              help="Delete the chunks of an interrupted build of --out and start over (without it, a "
                   "rerun with other settings refuses).")
def build(network, split, samples, seed, out, workers, scheduler, chunk, notes, quiet, fresh) -> None:
    """Build a split of NETWORK (bundled name or file) into the folder --out (resumable)."""
    from ..splits import build_split
    progress = _Progress(quiet)
    try:
        m = build_split(network, split, samples=samples, seed=seed, out=out, workers=workers,
                        scheduler=scheduler, chunk=chunk, notes=notes, progress=progress, fresh=fresh)
    finally:
        progress.stop()
    rej = sum(m["rejected"].values())
    console.print(f"{shown(out, 200)}: {m['samples']} samples, {rej} draws rejected, split_hash {m['split_hash']}, "
                  f"identity_hash {m['identity_hash']}")


@splits.command(short_help="Write the recipe that rebuilds a split.")
@click.argument("split")
@click.option("--out", "out", type=click.Path(dir_okay=False), required=True,
              help="Recipe file to write (committed as recipes/<network>/<split>.json).")
@click.option("--chunk", type=click.IntRange(min=1), default=10, show_default=True,
              help="Samples per chunk of the rebuild (does not change the content).")
@click.option("--max-attempts", type=click.IntRange(min=1), default=100, show_default=True,
              help="Draws tried per sample in the rebuild (at least what the build needed; does not change "
                   "the content).")
@click.option("--train", "train", type=click.Path(file_okay=False), default=None,
              help="The training split a test split was built beside (default: the sibling folder train).")
@click.option("--pilot/--no-pilot", "pilot", default=None,
              help="Keep the spanning design's fitted pilot in the recipe, solved here and checked against the "
                   "split's (--pilot: refuse if it differs; default: keep it if it is the split's).")
@click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True,
              help="Local worker processes for solving the pilot and finding each sample's draw.")
def recipe(split, out, chunk, max_attempts, train, pilot, workers) -> None:
    """Write the recipe of SPLIT (a split folder, NETWORK/SPLIT or a split hash) to --out."""
    from ..splits import recipe_from_split, write_recipe
    from ..splits._recipe import pilot_hash_in
    r = recipe_from_split(split, chunk=chunk, max_attempts=max_attempts, train=train, pilot=pilot, workers=workers)
    path = write_recipe(r, out)
    kept = ""
    if "pilot" in r:
        kept = f", with its fitted pilot ({len(r['pilot']['slots'])} of {r['pilot']['draws']} draws kept)"
    elif pilot is None and pilot_hash_in(r["design"]["parameters"]):
        kept = ", without its pilot (solved here, it differs from the split's: a rebuild solves it again)"
    att = r["expected"].get("sample_attempts")
    if att is not None:
        known = sum(a >= 0 for a in att)
        kept += ", with each sample's draw" if known == len(att) else f", with the draws of {known} of {len(att)} samples"
    console.print(f"{shown(path, 200)}: recipe of {shown(r['network']['name'])}/{r['split']}, {r['samples']} samples, "
                  f"identity_hash {r['expected']['identity_hash']}{kept}")


@splits.command(short_help="Rebuild a split from its recipe and check every hash.")
@click.argument("recipe_file", metavar="RECIPE")
@click.option("--out", "out", type=click.Path(file_okay=False), default=None,
              help="Folder to create (default: <splits root>/<network>/<split>).")
@click.option("--workers", type=click.IntRange(min=1), default=1, show_default=True, help="Local worker processes.")
@click.option("--scheduler", default=None, help="Dask scheduler address (tcp://HOST:PORT) instead of local workers.")
@click.option("--network", "network", type=click.Path(dir_okay=False), default=None,
              help="Network file, for a recipe whose network is not bundled.")
@click.option("--train", "train", type=click.Path(file_okay=False), default=None,
              help="For a test split: the training split to build beside (default: the sibling folder train).")
@click.option("--quiet", is_flag=True, help="No progress bar.")
@click.option("--fresh", is_flag=True, help="Delete the chunks of an interrupted build of --out and start over.")
@click.option("--exact", is_flag=True,
              help="Every sample bit for bit (without it, a sample may differ from the recipe within the "
                   "solver's tolerance, as on another CPU model, checked against the recipe's sketches).")
def rebuild(recipe_file, out, workers, scheduler, network, train, quiet, fresh, exact) -> None:
    """Rebuild the split RECIPE describes (a recipe file or NETWORK/SPLIT under recipes/) and check it
    against the recipe as it goes; exit 3 at the first difference beyond the solver's tolerance (any difference
    with --exact), naming the sample and file."""
    from ..splits import Agreement, build_from_recipe
    progress = _Progress(quiet)
    agreement = Agreement()
    try:
        m = build_from_recipe(recipe_file, out=out, workers=workers, scheduler=scheduler, network=network,
                              train=train, fresh=fresh, progress=progress, exact=exact, agreement=agreement)
    finally:
        progress.stop()
    console.print(f"{m['network']['name']}/{m['split']}: {agreement.describe()}; identity_hash "
                  f"{m['identity_hash']} (split_hash {m['split_hash']})")


@splits.command(short_help="Recompute every hash of frozen splits.")
@click.argument("paths", nargs=-1, type=click.Path())
@click.option("--recipe", "recipe_file", default=None,
              help="Also check the split (one PATH) against this recipe (a file or NETWORK/SPLIT), sample by sample.")
@click.option("--exact", is_flag=True,
              help="With --recipe: every sample bit for bit (without it, differences within the solver's "
                   "tolerance, as on another CPU model, pass).")
def verify(paths, recipe_file, exact) -> None:
    """Recompute every hash of the splits at PATHS (default: every frozen split); exit 3 on a difference."""
    from ..splits import Agreement, check_split_against_recipe, list_splits, resolve_split, splits_root, verify_split
    folders = [resolve_split(p) for p in paths] if paths else list_splits()
    if not folders:
        raise InputError("no frozen splits found", where=str(splits_root()))
    if recipe_file is not None and len(folders) != 1:
        raise InputError(f"checks one split against a recipe: give one PATH, got {len(folders)}", where="--recipe")
    for folder in folders:
        r = verify_split(folder)
        extra = "" if r.references_present else " (references withheld; manifest commits to their hash)"
        console.print(f"ok  {r.network}/{r.split}  {r.samples} samples  {r.split_hash[:16]}  {folder}{extra}")
    if recipe_file is not None:
        agreement = Agreement()
        ident = check_split_against_recipe(recipe_file, folders[0], exact=exact, agreement=agreement)
        what = "every sample" if agreement.identical else agreement.describe().replace(" reproduce the recipe", "")
        console.print(f"ok  matches the recipe {shown(recipe_file, 200)}: {what}, identity_hash {ident[:16]}")


def _fmt(x: float, pct: bool = False) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    return f"{100 * x:.0f}%" if pct else f"{x:.2g}"


@splits.command(short_help="Statistics of the frozen splits of a network.")
@click.argument("network")
def show(network) -> None:
    """Statistics of the frozen splits of NETWORK: load range, regimes, binding limits, rejections, solve times."""
    from ..splits import SPLIT_NAMES, splits_root, summarize_split
    folder = splits_root() / network
    names = [s for s in SPLIT_NAMES if (folder / s / "manifest.json").exists()]
    if not names:
        raise InputError("no frozen splits for this network", where=str(folder))
    from rich import box
    def table(title, pad=1):
        return Table(title=title, box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False,
                     padding=(0, pad, 0, 0), title_justify="left")
    t = table(f"Frozen splits of {network}")
    for col in ("split", "samples", "load %\nmin/med/max", "regimes", "thermal\nbinding",
                "voltage\nbinding", "rejected\ndraws", "solve ms\nmed/max"):
        t.add_column(col, no_wrap=True)
    # coverage: a second table, so that both fit 80 columns
    c = table(f"Coverage of {network}: share of samples with each limit family binding", pad=0)
    for col in ("split", "regimes", "new in\nlast block", "voltage", "active\npower", "reactive\npower",
                "thermal", "angle", "seen in\ntrain"):
        c.add_column(col, no_wrap=True)
    notes, kinds, computed = [], [], []
    for name in names:
        s = summarize_split(folder / name)
        lo, med, hi = s.load_pct_of_base
        sec = s.solve_seconds
        t.add_row(name, str(s.samples), f"{lo:.0f}/{med:.0f}/{hi:.0f}", str(s.distinct_signatures),
                  _fmt(s.share_thermal, True), _fmt(s.share_voltage, True), str(sum(s.rejected.values())),
                  f"{1e3 * sec['median']:.0f}/{1e3 * sec['max']:.0f}")
        shares = s.family_shares or {}
        if s.last_block_new is None:
            last = "-"
        else:
            size = "" if s.last_block_samples == s.discovery_block else f"/{s.last_block_samples}"
            last = f"{s.last_block_new}{size} " + ("rising" if s.still_rising else "flat")
        c.add_row(name, "-" if s.regimes is None else str(s.regimes), last,
                  *(_fmt(shares.get(f), True) for f in ("voltage", "active_power", "reactive_power",
                                                        "thermal", "angle")),
                  _fmt(s.regime_seen_in_train, True))
        if s.kinds:
            kinds.append(f"{name} kinds: " + ", ".join(f"{k} {v}" for k, v in s.kinds.items()))
        if s.states:
            kinds.append(f"{name} states: {s.states}")
        if s.coverage_from == "references":
            computed.append(name)
        if s.rejected:
            notes.append(f"{name} rejected: " + ", ".join(f"{k} {v}" for k, v in sorted(s.rejected.items())))
        if s.notes:
            notes.append(f"{name} notes: {s.notes}")
    console.print(t)
    console.print(c)
    console.print(f"new in last block: regimes first seen in the last {s.discovery_block} samples "
                  "(n/m: m samples);\nrising: the discovery curve still rises. seen in train: share of "
                  "samples whose\nregime occurs in train.")
    if computed:
        console.print("computed from the references (no coverage in the manifest): " + ", ".join(computed))
    for line in kinds + notes:
        console.print(line)


@splits.command(short_help="Write a split without its references.")
@click.argument("split")
@click.option("--out", "out", type=click.Path(file_okay=False), required=True, help="Folder to create.")
def publish(split, out) -> None:
    """Write SPLIT's inputs and manifest (no references) to --out; the manifest commits to the references' hash."""
    from ..splits import publish_split
    path = publish_split(split, out)
    console.print(f"published {split} to {path} (inputs and manifest; references withheld)")
