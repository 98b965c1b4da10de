"""The ``magvault`` command: a thin layer over :class:`magvault.Vault`.

Every command parses its options, calls one Vault method and prints.  Listing
commands take ``--json`` and then print exactly one JSON document on stdout.
Exit codes: 0 success; 1 a value magvault refused (one line on stderr naming
what to fix); 2 a usage error reported by the option parser.
"""

from __future__ import annotations

import json
import math
import os
import sys
from typing import Any

import click

from . import __version__
from .errors import MagvaultError
from .jsonutil import jsonable
from .vocabulary import INSTRUMENT_KINDS, RUN_KINDS, RUN_STATUSES, SHAPES, SPECIMEN_KINDS

DEFAULT_DB = "magvault.db"


class State:
    def __init__(self, db: str):
        self.db = db
        self._vault = None

    def vault(self, *, create: bool = False):
        if self._vault is None:
            from .vault import open_vault

            self._vault = open_vault(self.db, create=create)
        return self._vault

    def close(self) -> None:
        if self._vault is not None:
            self._vault.close()


class VaultGroup(click.Group):
    """Turns magvault's own errors into exit code 1 with a one-line message."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except MagvaultError as exc:
            raise click.ClickException(exc.message.replace("\n", " ")) from None
        except (click.exceptions.Exit, click.ClickException, click.Abort):
            raise
        except KeyboardInterrupt:
            raise click.Abort() from None
        except BrokenPipeError:  # output piped into `head` and the like: stop quietly
            sys.stdout = open(os.devnull, "w")
            raise click.exceptions.Exit(0) from None
        except Exception as exc:  # a bug, not bad input: still no traceback unless asked
            if os.environ.get("MAGVAULT_DEBUG"):
                raise
            raise click.ClickException(f"internal error ({type(exc).__name__}: {exc}); "
                                       "set MAGVAULT_DEBUG=1 to see where") from None


def emit_json(doc: Any) -> None:
    click.echo(json.dumps(clean(doc), allow_nan=False, indent=1, ensure_ascii=False))


def clean(value: Any) -> Any:
    """JSON-safe values: NaN and pandas' missing values become null."""
    try:
        import pandas as pd

        if isinstance(value, pd.DataFrame):
            return [clean(r) for r in value.to_dict(orient="records")]
        if value is pd.NA or value is pd.NaT:
            return None
    except ImportError:  # pragma: no cover
        pass
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    return jsonable(value) if not isinstance(value, (str, int, bool, type(None))) else value


def echo_table(rows: list[dict[str, Any]], columns: list[str]) -> None:
    if not rows:
        click.echo("(none)")
        return
    text = [[_cell(r.get(c)) for c in columns] for r in rows]
    widths = [max(len(c), *(len(t[i]) for t in text)) for i, c in enumerate(columns)]
    click.echo("  ".join(c.ljust(w) for c, w in zip(columns, widths)).rstrip())
    for t in text:
        click.echo("  ".join(v.ljust(w) for v, w in zip(t, widths)).rstrip())


def _cell(value: Any) -> str:
    value = clean(value)
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, (dict, list)):
        return json.dumps(value)[:40]
    return str(value)


def warn(message: str) -> None:
    click.echo(f"warning: {message}", err=True)


json_option = click.option("--json", "as_json", is_flag=True, help="Print one JSON document instead of a table.")
pass_state = click.make_pass_decorator(State)


@click.group(cls=VaultGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--db", envvar="MAGVAULT_DB", default=DEFAULT_DB, show_default=True, metavar="PATH_OR_URL",
              help="SQLite file or SQLAlchemy URL (postgresql+psycopg://...); MAGVAULT_DB also sets it.")
@click.version_option(__version__, prog_name="magvault")
@click.pass_context
def main(ctx: click.Context, db: str) -> None:
    """magvault: specimens, runs and derived transitions of magnetic minerals, with their provenance."""
    ctx.obj = ctx.with_resource(_closing(State(db)))


class _closing:
    def __init__(self, state: State):
        self.state = state

    def __enter__(self) -> State:
        return self.state

    def __exit__(self, *exc) -> None:
        self.state.close()


# --- vault ------------------------------------------------------------------------------------

@main.command()
@pass_state
def init(state: State) -> None:
    """Create the vault (or upgrade its schema to this version)."""
    vault = state.vault(create=True)
    click.echo(f"vault ready: {vault!r}")


@main.command()
@click.option("--no-serve", is_flag=True, help="Build the demo and stop (do not open the dashboard).")
@click.option("--out", "out_dir", default=".", show_default=True, type=click.Path(file_okay=False),
              help="Folder for magvault-demo.db and the magvault-demo/ exports and manifest.")
@click.option("--seed", type=int, default=None, help="Seed of the invented collection.")
@click.option("--host", default="127.0.0.1", show_default=True)
@click.option("--port", default=5000, show_default=True, type=click.IntRange(0, 65535))
def demo(no_serve, out_dir, seed, host, port) -> None:
    """Build the invented demo collection (and serve its dashboard)."""
    from . import demo as demo_builder

    kwargs = {"seed": seed} if seed is not None else {}
    summary = demo_builder.build(out_dir, progress=lambda m: click.echo(f"... {m}", err=True), **kwargs)
    click.echo(summary.text())
    if not no_serve:
        _serve(str(summary.database), host, port)


@main.command()
@click.option("--host", default="127.0.0.1", show_default=True, help="Address to bind (local only by default).")
@click.option("--port", default=5000, show_default=True, type=click.IntRange(0, 65535))
@pass_state
def serve(state: State, host, port) -> None:
    """Serve the dashboard for this vault."""
    state.vault()  # refuse a missing vault before starting the server
    _serve(state.db, host, port)


def _serve(db: str, host: str, port: int) -> None:
    from .paths import part

    part("webui").serve(db, host=host, port=port)


# --- specimens ----------------------------------------------------------------------------------

@main.group()
def specimen() -> None:
    """Register specimens and pieces cut from them; list and show them."""


@specimen.command("add")
@click.argument("code")
@click.option("--parent", metavar="CODE", help="The specimen this piece was cut from.")
@click.option("--mass", metavar="QTY", help="Mass with unit, e.g. '12.5 mg' or '12.50+/-0.02 mg'.")
@click.option("--kind", type=click.Choice(SPECIMEN_KINDS), help="What sort of piece it is.")
@click.option("--dims", metavar="TEXT", help="Dimensions, e.g. '2.1 x 1.5 x 0.8 mm' (optionally '+/- 0.05 mm').")
@click.option("--origin", metavar="NAME", help="Where the material came from (created when new).")
@click.option("--storage", metavar="TEXT", help="Where the piece is kept.")
@click.option("--notes", metavar="TEXT")
@click.option("--same-orientation", is_flag=True, help="The piece keeps its parent's crystal orientation.")
@pass_state
def specimen_add(state: State, code, parent, mass, kind, dims, origin, storage, notes, same_orientation) -> None:
    """Add specimen CODE."""
    out = state.vault().add_specimen(code, parent=parent, mass=mass, kind=kind, dims=dims, origin=origin,
                                     storage=storage, notes=notes, same_orientation=same_orientation)
    for w in out["warnings"]:
        warn(w)
    click.echo(f"added specimen {out['code']}" + (f" (cut from {out['parent']})" if out["parent"] else ""))


@specimen.command("list")
@json_option
@pass_state
def specimen_list(state: State, as_json: bool) -> None:
    """List specimens with parent, kind, mass and composition."""
    frame = state.vault().specimens()
    if as_json:
        emit_json(frame)
    else:
        echo_table(clean(frame), ["code", "parent", "kind", "mass_kg", "origin", "x", "superstructure", "n_runs"])


@specimen.command("show")
@click.argument("code")
@json_option
@pass_state
def specimen_show(state: State, code: str, as_json: bool) -> None:
    """Show one specimen: lineage tree, orientation, compositions, treatments and runs."""
    doc = state.vault().specimen(code)
    if as_json:
        emit_json(doc)
        return
    from .textviews import specimen_text

    click.echo(specimen_text(doc))


# --- runs ---------------------------------------------------------------------------------------

@main.command("runs")
@click.option("--specimen", metavar="CODE")
@click.option("--kind", type=click.Choice(RUN_KINDS))
@click.option("--status", type=click.Choice(RUN_STATUSES))
@json_option
@pass_state
def runs_cmd(state: State, specimen, kind, status, as_json) -> None:
    """List runs (id, specimen, kind, status, started)."""
    frame = state.vault().runs(specimen=specimen, kind=kind, status=status)
    if as_json:
        emit_json(frame)
    else:
        echo_table(clean(frame), ["id", "specimen", "kind", "status", "started", "source_name", "n_rows"])


@main.group()
def run() -> None:
    """Log a run before its file exists; retract or supersede runs; show one."""


@run.command("log")
@click.option("--specimen", required=True, metavar="CODE")
@click.option("--kind", required=True, type=click.Choice(RUN_KINDS))
@click.option("--status", type=click.Choice(("planned", "running")), default="planned", show_default=True)
@click.option("--started", metavar="ISO8601", help="Start time (UTC when no zone is given).")
@click.option("--instrument", metavar="NAME")
@click.option("--operator", metavar="NAME")
@click.option("--direction", metavar="X|Y|Z|x,y,z", help="Applied field or beam direction in the specimen frame.")
@click.option("--group", metavar="LABEL", help="Ties runs measured together (e.g. three axes of one sweep).")
@click.option("--notes", metavar="TEXT")
@pass_state
def run_log(state: State, specimen, kind, status, started, instrument, operator, direction, group, notes) -> None:
    """Log a planned or running run; prints its id."""
    run_id = state.vault().log_run(specimen, kind, status=status, started=started, instrument=instrument,
                                   operator=operator, direction=direction, group=group, notes=notes)
    click.echo(run_id)


@run.command("retract")
@click.argument("run_id", metavar="ID")
@click.option("--reason", required=True, metavar="TEXT")
@pass_state
def run_retract(state: State, run_id, reason) -> None:
    """Retract run ID (it stays in the vault, out of every estimate)."""
    state.vault().retract_run(run_id, reason=reason)
    click.echo(f"run {run_id} retracted")


@run.command("supersede")
@click.argument("run_id", metavar="ID")
@click.option("--by", "by", required=True, metavar="ID", help="The run that replaces it.")
@click.option("--reason", metavar="TEXT")
@pass_state
def run_supersede(state: State, run_id, by, reason) -> None:
    """Mark run ID superseded by another run of the same specimen."""
    state.vault().supersede_run(run_id, by=by, reason=reason)
    click.echo(f"run {run_id} superseded by run {by}")


@run.command("show")
@click.argument("run_id", metavar="ID")
@json_option
@pass_state
def run_show(state: State, run_id, as_json) -> None:
    """Show one run: conditions, raw file, series versions."""
    doc = state.vault().run(run_id)
    if as_json:
        emit_json(doc)
    else:
        for key, value in doc.items():
            click.echo(f"{key:>14}: {_cell(value) if not isinstance(value, (dict, list)) else json.dumps(clean(value))}")


@main.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--specimen", metavar="CODE", help="Specimen measured (new run).")
@click.option("--kind", type=click.Choice(RUN_KINDS), help="Run kind (new run).")
@click.option("--run", "run_id", metavar="ID", help="Attach the file to a run logged earlier as planned or running.")
@click.option("--profile", metavar="NAME", help="A saved column mapping.")
@click.option("--shape", type=click.Choice(SHAPES),
              help="Force the shape instead of sniffing it.")
@click.option("--map", "mapping", metavar="'COL=target,...'", help="Correct the guessed mapping, e.g. 'Temp=temperature_K'.")
@click.option("--direction", metavar="X|Y|Z|x,y,z")
@click.option("--group", metavar="LABEL")
@click.option("--instrument", metavar="NAME")
@click.option("--encoding", metavar="NAME", help="Text encoding when it cannot be detected (e.g. utf-16-le).")
@click.option("--sheet", metavar="NAME", help="Spreadsheet sheet (default: the first).")
@click.option("--set", "overrides", multiple=True, metavar="KEY=VALUE",
              help="Run condition overriding the file, e.g. 'field=0.1 T', 'wavelength=Cu K-alpha1'.")
@click.option("--again", is_flag=True, help="Import bytes already imported for this specimen as a new run.")
@click.option("--preview", is_flag=True, help="Show the guessed shape, mapping and first rows; write nothing.")
@pass_state
def ingest(state: State, file, specimen, kind, run_id, profile, shape, mapping, direction, group, instrument,
           encoding, sheet, overrides, again, preview) -> None:
    """Import an instrument export FILE; prints the new run id."""
    vault = state.vault()
    if preview:
        if not kind and run_id:
            kind = vault.run(run_id)["kind"]
        if not kind:
            raise click.UsageError("--preview needs --kind (or --run)")
        parsed = vault.preview(file, kind=kind, profile=profile, shape=shape, mapping=mapping, encoding=encoding,
                               sheet=sheet, overrides=list(overrides))
        click.echo(parsed.preview())
        return
    report = vault.ingest(file, specimen=specimen, kind=kind, run=run_id, profile=profile, shape=shape,
                          mapping=mapping, direction=direction, group=group, instrument=instrument,
                          encoding=encoding, sheet=sheet, overrides=list(overrides), again=again)
    for w in report.warnings:
        warn(w)
    click.echo(report.run_id)


@main.group()
def profile() -> None:
    """Saved column mappings for exports that the guess reads wrongly."""


@profile.command("save")
@click.argument("name")
@click.option("--from-run", metavar="ID", help="Take the mapping that imported this run.")
@click.option("--map", "mapping", metavar="'COL=target,...'", help="The mapping, e.g. 'Temp=temperature_K'.")
@click.option("--kind", type=click.Choice(RUN_KINDS), help="Run kind the profile is for (with --map).")
@click.option("--shape", type=click.Choice(SHAPES))
@pass_state
def profile_save(state: State, name, from_run, mapping, kind, shape) -> None:
    """Save profile NAME; use it with `magvault ingest --profile NAME`."""
    doc = state.vault().save_profile(name, from_run=from_run, mapping=mapping, kind=kind, shape=shape)
    click.echo(f"saved profile {name}: " + ", ".join(f"{k} -> {v}" for k, v in doc["mapping"].items()))


@profile.command("list")
@json_option
@pass_state
def profile_list(state: State, as_json) -> None:
    """List saved profiles."""
    rows = state.vault().profiles()
    if as_json:
        emit_json(rows)
    else:
        echo_table(rows, ["name", "run_kind", "shape", "mapping"])


@profile.command("show")
@click.argument("name")
@json_option
@pass_state
def profile_show(state: State, name, as_json) -> None:
    """Show one profile."""
    doc = state.vault().profile(name)
    if as_json:
        emit_json(doc)
    else:
        click.echo(json.dumps(doc, indent=1, ensure_ascii=False))


# --- derived values ---------------------------------------------------------------------------------

@main.command()
@click.option("--run", "run_id", metavar="ID", help="Derive one run.")
@click.option("--all", "all_runs", is_flag=True, help="Derive every current run.")
@json_option
@pass_state
def derive(state: State, run_id, all_runs, as_json) -> None:
    """Extract transitions and results from runs, recording how each was derived."""
    if bool(run_id) == bool(all_runs):
        raise click.UsageError("give --run ID or --all (one of them)")
    summary = state.vault().derive(run=run_id, all=all_runs) if run_id else state.vault().derive(all=True)
    if as_json:
        emit_json(summary)
        return
    click.echo(f"derived {summary['runs']} runs: {summary['derivations_created']} new derivations, "
               f"{summary['derivations_reused']} unchanged; {summary['transitions']} transitions, "
               f"{summary['results']} results")
    for line in summary["failed"]:
        warn(f"failed: {line}")


@main.command()
@click.option("--specimen", metavar="CODE")
@click.option("--kind", metavar="KIND", help="Transition kind id (see `magvault kinds`).")
@click.option("--run", "run_id", metavar="ID")
@click.option("--method", metavar="NAME", help="Only rows of this method (default: every method).")
@click.option("--primary", is_flag=True, help="Only the primary (combined) rows.")
@click.option("--branch", type=click.Choice(("heating", "cooling")))
@click.option("--all-versions", is_flag=True, help="Include rows of older derivation versions.")
@json_option
@pass_state
def transitions(state: State, specimen, kind, run_id, method, primary, branch, all_versions, as_json) -> None:
    """List derived transition temperatures with uncertainties and methods."""
    frame = state.vault().transitions(specimen=specimen, kind=kind, run=run_id, method=method, primary_only=primary,
                                      branch=branch, all_versions=all_versions)
    if as_json:
        emit_json(frame)
    else:
        echo_table(clean(frame), ["specimen", "run", "kind", "temperature_K", "uncertainty_K", "method", "branch",
                                  "component", "primary"])


@main.command()
@click.option("--specimen", metavar="CODE")
@click.option("--run", "run_id", metavar="ID")
@click.option("--quantity", metavar="NAME", help="e.g. Ms, Hc, Hcr, Mr_Ms, theta_K.")
@click.option("--all-versions", is_flag=True, help="Include rows of older derivation versions.")
@json_option
@pass_state
def results(state: State, specimen, run_id, quantity, all_versions, as_json) -> None:
    """List every other derived number (Ms, Mr, Hc, Hcr, ratios, theta...) in SI."""
    if specimen and run_id:
        raise click.UsageError("give --run or --specimen, not both")
    frame = state.vault().results(specimen=specimen, run=run_id, quantity=quantity, all_versions=all_versions)
    if as_json:
        emit_json(frame)
    else:
        echo_table(clean(frame), ["specimen", "run", "quantity", "value", "uncertainty", "unit", "method",
                                  "block_temperature_K"])


# --- collection queries ------------------------------------------------------------------------------

def _records(frame) -> list[dict[str, Any]]:
    from .queries import to_records

    return to_records(frame)


@main.command()
@click.option("--kind", required=True, metavar="KIND", help="Transition kind id, e.g. low-t.")
@click.option("--reference", metavar="KELVIN", help="A fixed reference temperature.")
@click.option("--against", type=click.Choice(("collection", "trend", "earliest", "treatment")),
              help="collection: median of the other specimens; trend: fit against x without the specimen; "
                   "earliest: the specimen's first run; treatment: its runs before its latest treatment.")
@click.option("--against-run", metavar="ID", help="That run's specimen: its later runs against this run.")
@click.option("--sigma", default="3", show_default=True, metavar="N", help="Flag when |shift| >= N combined sigma.")
@click.option("--by", type=click.Choice(("superstructure", "origin", "parent", "field", "direction")),
              help="Form collection and trend references within groups.")
@click.option("--bins", metavar="T1,T2,...", help="Field bin edges in tesla for --by field (default: decades).")
@click.option("--branch", type=click.Choice(("heating", "cooling")), default="heating", show_default=True)
@click.option("--method", metavar="NAME", help="Use this method's rows instead of the primary ones.")
@click.option("--save", "save_as", metavar="NAME", help="Also save these parameters as a named query.")
@json_option
@pass_state
def shifts(state: State, kind, reference, against, against_run, sigma, by, bins, branch, method, save_as,
           as_json) -> None:
    """Which specimens show a transition shifted from a reference, beyond uncertainty."""
    params = {"kind": kind, "reference": reference, "against": against, "against_run": against_run,
              "sigma": sigma, "by": by, "branch": branch, "method": method,
              "bins": _float_list(bins, "--bins") if bins else None}
    vault = state.vault()
    frame = vault.shifts(**params)
    if save_as:
        vault.save_query(save_as, "shifts", {k: v for k, v in params.items() if v is not None})
    if as_json:
        emit_json(_records(frame))
        return
    rows = sorted(_records(frame), key=lambda r: (not r.get("flagged"), r.get("group") or "", r["specimen"]))
    echo_table(rows, ["specimen"] + (["group"] if by else []) + ["temperature_K", "uncertainty_K", "reference_K",
                                                                  "shift_K", "shift_uncertainty_K", "sigma",
                                                                  "flagged", "note"])


def _float_list(text: str, option: str) -> list[float]:
    try:
        return [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        from .errors import InvalidValue

        raise InvalidValue(f"{option}: expected numbers separated by commas, got {text!r}") from None


@main.command()
@click.option("--kinds", metavar="A,B", help="Two transition kinds on the same specimens.")
@click.option("--kind", metavar="KIND", help="One kind, compared across --run-kinds or --methods.")
@click.option("--run-kinds", metavar="A,B", help="Two run kinds, e.g. thermomagnetic,susceptibility.")
@click.option("--methods", metavar="A,B", help="Two methods, e.g. dmdt-extremum,two-tangent.")
@click.option("--branch", type=click.Choice(("heating", "cooling")), default="heating", show_default=True)
@click.option("--sigma", default="3", show_default=True, metavar="N")
@click.option("--save", "save_as", metavar="NAME", help="Also save these parameters as a named query.")
@json_option
@pass_state
def coupled(state: State, kinds, kind, run_kinds, methods, branch, sigma, save_as, as_json) -> None:
    """Do two transitions coincide on the same specimens? Differences with uncertainties."""
    params = {"kinds": kinds, "kind": kind, "run_kinds": run_kinds, "methods": methods, "branch": branch,
              "sigma": sigma}
    vault = state.vault()
    frame = vault.coupled(**params)
    if save_as:
        vault.save_query(save_as, "coupled", {k: v for k, v in params.items() if v is not None})
    if as_json:
        emit_json(_records(frame))
    else:
        echo_table(_records(frame), ["specimen", "a", "b", "a_K", "b_K", "difference_K", "difference_uncertainty_K",
                                     "sigma", "coincide", "note"])


@main.command()
@click.option("--kind", required=True, metavar="KIND")
@click.option("--against", type=click.Choice(("x", "field", "angle")), default="x", show_default=True,
              help="Composition x in Fe(1-x)S, applied field, or angle between field and c.")
@click.option("--branch", type=click.Choice(("heating", "cooling")), default="heating", show_default=True)
@click.option("--sigma", default="3", show_default=True, metavar="N", help="Outlier threshold.")
@json_option
@pass_state
def correlate(state: State, kind, against, branch, sigma, as_json) -> None:
    """Weighted straight line of a transition temperature against a property, with outliers."""
    res = state.vault().correlate(kind, against=against, branch=branch, sigma=sigma)
    doc = {"x": res.x, "n": res.n, "slope": res.slope, "slope_uncertainty": res.slope_uncertainty,
           "intercept": res.intercept, "intercept_uncertainty": res.intercept_uncertainty,
           "covariance": None if res.covariance is None else res.covariance.tolist(), "scatter": res.scatter,
           "note": res.note, "points": _records(res.points)}
    if as_json:
        emit_json(doc)
        return
    from .textviews import fmt_unc

    if res.slope is None:
        click.echo(f"no fit: {res.note}")
    else:
        click.echo(f"{kind} against {res.x}: slope {fmt_unc(res.slope, res.slope_uncertainty)} K per unit, "
                   f"intercept {fmt_unc(res.intercept, res.intercept_uncertainty)} K, {res.n} points")
    outliers = [p for p in doc["points"] if p.get("outlier")]
    for p in outliers:
        click.echo(f"  outlier: {p.get('specimen')} {p.get('temperature_K'):.4g} K")


@main.group()
def query() -> None:
    """Saved queries: list, show and re-run them by name."""


@query.command("list")
@json_option
@pass_state
def query_list(state: State, as_json) -> None:
    """List saved queries."""
    rows = state.vault().saved_queries()
    if as_json:
        emit_json(rows)
    else:
        echo_table(rows, ["name", "query", "parameters", "created_at"])


@query.command("show")
@click.argument("name")
@json_option
@pass_state
def query_show(state: State, name, as_json) -> None:
    """Show a saved query's parameters."""
    doc = state.vault().saved_query(name)
    if as_json:
        emit_json(doc)
    else:
        click.echo(json.dumps(doc, indent=1))


@query.command("delete")
@click.argument("name")
@json_option
@pass_state
def query_delete(state: State, name, as_json) -> None:
    """Remove a saved query (the event log keeps its parameters)."""
    doc = state.vault().delete_saved_query(name)
    if as_json:
        emit_json(doc)
    else:
        click.echo(f"deleted saved query {name!r} ({doc['query']})")


@query.command("run")
@click.argument("name")
@json_option
@pass_state
def query_run(state: State, name, as_json) -> None:
    """Re-run a saved query by name."""
    out = state.vault().run_saved_query(name)
    rows = _records(out) if hasattr(out, "columns") else _records(out.points)
    if as_json:
        emit_json(rows)
    else:
        echo_table(rows, list(rows[0].keys())[:9] if rows else [])


# --- publication -------------------------------------------------------------------------------------

@main.command()
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="New folder for the dataset.")
@click.option("--specimen", "specimens", multiple=True, metavar="CODE", help="Only these specimens (repeat).")
@click.option("--kind", "kinds", multiple=True, type=click.Choice(RUN_KINDS), help="Only these run kinds (repeat).")
@click.option("--name", metavar="NAME", help="Name of the dataset (versions count up per name).")
@click.option("--title", metavar="TEXT")
@click.option("--author", "authors", multiple=True, metavar="NAME", help="Author for CITATION.cff (repeat).")
@json_option
@pass_state
def bundle(state: State, out_dir, specimens, kinds, name, title, authors, as_json) -> None:
    """Freeze a selection into a citable, checksummed dataset folder."""
    doc = state.vault().bundle(out_dir, name=name, specimens=list(specimens) or None, kinds=list(kinds) or None,
                               title=title, authors=list(authors) or None)
    if as_json:
        emit_json(doc)
    else:
        click.echo(f"bundle {doc['name']} v{doc['version']}: {doc['files']} files, {len(doc['runs'])} runs, "
                   f"{len(doc['specimens'])} specimens in {doc['folder']}")


@main.command()
@click.option("--bundle", "bundle_dir", type=click.Path(file_okay=False), help="Check a bundle folder instead.")
@json_option
@pass_state
def verify(state: State, bundle_dir, as_json) -> None:
    """Check that stored raw files (or a bundle's files) still match their SHA-256."""
    problems = state.vault().verify(bundle_dir)
    if as_json:
        emit_json({"ok": not problems, "problems": problems})
    else:
        for p in problems:
            click.echo(p)
        click.echo("all checksums match" if not problems else f"{len(problems)} problem(s)")
    if problems:
        raise click.exceptions.Exit(1)


# --- registry context -----------------------------------------------------------------------------

@main.group()
def composition() -> None:
    """Record composition analyses; x in Fe(1-x)S is derived with its uncertainty."""


@composition.command("add")
@click.argument("code")
@click.option("--method", required=True, metavar="NAME", help="microprobe, wet chemistry, diffraction, ...")
@click.option("--wt", multiple=True, metavar="EL=V[+/-U]", help="Element in wt%, e.g. Fe=60.5+/-0.3 (repeat).")
@click.option("--at", "at_", multiple=True, metavar="EL=V[+/-U]", help="Element in at%, e.g. Fe=46.7+/-0.2 (repeat).")
@click.option("--d102", metavar="QTY", help="Subcell d(102) spacing, e.g. '2.0585+/-0.0005 A'.")
@click.option("--superstructure", metavar="LABEL", help="1C, 2C, 4C, 5C, 6C, NC, ...")
@click.option("--measured", metavar="ISO8601", help="When the analysis was made.")
@click.option("--notes", metavar="TEXT")
@pass_state
def composition_add(state: State, code, method, wt, at_, d102, superstructure, measured, notes) -> None:
    """Add an analysis of specimen CODE."""
    out = state.vault().add_composition(code, method=method, wt=list(wt) or None, at=list(at_) or None,
                                        d102=d102, superstructure=superstructure, measured=measured, notes=notes)
    for w in out["warnings"]:
        warn(w)
    from .textviews import fmt_unc

    click.echo(f"{code}: x = {fmt_unc(out['x'], out['x_uncertainty'])} in Fe(1-x)S"
               + (f", {out['superstructure']}" if out["superstructure"] else ""))


@main.group()
def orientation() -> None:
    """Record how a specimen's frame relates to its crystal axes."""


@orientation.command("add")
@click.argument("code")
@click.option("--matrix", metavar="'r11,...,r33'", help="Rotation, row by row: specimen frame -> crystal frame.")
@click.option("--axes", metavar="'a=X,c*=Z'", help="Specimen axes along a and c* (hexagonal: c is accepted).")
@click.option("--euler", metavar="'phi1,Phi,phi2'",
              help="Bunge Euler angles (Z-X-Z, degrees) rotating the specimen frame onto the crystal frame.")
@click.option("--system", required=True, type=click.Choice(("hexagonal", "monoclinic", "orthorhombic", "cubic")))
@click.option("--cell", metavar="'a=3.44 c=5.73'", help="Cell lengths in angstrom (and angles in degrees).")
@click.option("--method", required=True, metavar="Laue|EBSD|diffraction|visual")
@click.option("--uncertainty", metavar="ANGLE", help="e.g. '2 deg'.")
@click.option("--measured", metavar="ISO8601")
@pass_state
def orientation_add(state: State, code, matrix, axes, euler, system, cell, method, uncertainty, measured) -> None:
    """Add an orientation of specimen CODE (stored as a proper rotation).

    The matrix maps specimen-frame vectors to the crystal Cartesian frame with x along a,
    y in the a-b plane and z along c* (the usual orthogonalisation of the International Tables).
    """
    out = state.vault().add_orientation(code, system=system, method=method, matrix=matrix, axes=axes, euler=euler,
                                        cell=cell, uncertainty=uncertainty, measured=measured)
    for note in out.get("notes") or []:
        warn(note)
    click.echo(f"recorded orientation of {code} ({out['system']}, {out['method']})")


@main.group()
def treatment() -> None:
    """Record anneals, quenches, irradiations... done to a specimen."""


@treatment.command("add")
@click.argument("code")
@click.option("--kind", required=True, metavar="KIND", help="anneal, quench, irradiation, polishing, ...")
@click.option("--at", required=True, metavar="ISO8601", help="When it was done (UTC when no zone is given).")
@click.option("--set", "conditions", multiple=True, metavar="KEY=VALUE",
              help="temperature=573K, duration=2h, atmosphere=argon, ...")
@click.option("--notes", metavar="TEXT")
@pass_state
def treatment_add(state: State, code, kind, at, conditions, notes) -> None:
    """Record a treatment of specimen CODE."""
    state.vault().add_treatment(code, kind=kind, at=at, conditions=list(conditions), notes=notes)
    click.echo(f"recorded {kind} of {code}")


@main.group()
def instrument() -> None:
    """Describe the lab's instruments and their calibrations."""


@instrument.command("add")
@click.argument("name")
@click.option("--kind", required=True, type=click.Choice(INSTRUMENT_KINDS))
@click.option("--place", metavar="TEXT")
@click.option("--notes", metavar="TEXT")
@pass_state
def instrument_add(state: State, name, kind, place, notes) -> None:
    """Add instrument NAME (the lab's own name for it)."""
    state.vault().add_instrument(name, kind=kind, place=place, notes=notes)
    click.echo(f"added instrument {name}")


@instrument.command("calibrate")
@click.argument("name")
@click.option("--at", required=True, metavar="ISO8601")
@click.option("--note", metavar="TEXT")
@click.option("--file", type=click.Path(dir_okay=False), help="Calibration record, kept in the raw store.")
@pass_state
def instrument_calibrate(state: State, name, at, note, file) -> None:
    """Record a calibration of instrument NAME."""
    state.vault().calibrate_instrument(name, at=at, note=note, file=file)
    click.echo(f"recorded calibration of {name}")


@instrument.command("list")
@json_option
@pass_state
def instrument_list(state: State, as_json) -> None:
    """List instruments with their calibrations."""
    rows = state.vault().instruments()
    if as_json:
        emit_json(rows)
    else:
        echo_table(rows, ["name", "kind", "place"])


# --- catalogue and log -----------------------------------------------------------------------------

@main.command()
@json_option
@pass_state
def kinds(state: State, as_json) -> None:
    """List the transition kinds (id, typical range, search window, run kinds)."""
    rows = state.vault().kinds()
    if as_json:
        emit_json(rows)
    else:
        echo_table([{**r, "typical_K": "%g-%g" % tuple(r["typical_K"]), "window_K": "%g-%g" % tuple(r["window_K"]),
                     "run_kinds": ",".join(r["run_kinds"])} for r in rows],
                   ["id", "name", "typical_K", "window_K", "run_kinds"])


@main.command("events")
@click.option("--specimen", metavar="CODE")
@click.option("--user", metavar="NAME")
@click.option("--since", metavar="ISO8601")
@click.option("--until", metavar="ISO8601")
@click.option("--limit", type=click.IntRange(min=1), help="Only the newest N events.")
@json_option
@pass_state
def events_cmd(state: State, specimen, user, since, until, limit, as_json) -> None:
    """Show the audit log (append-only)."""
    frame = state.vault().events(specimen=specimen, user=user, since=since, until=until, limit=limit)
    if as_json:
        emit_json(frame)
    else:
        echo_table(clean(frame), ["id", "at", "user", "action", "entity", "entity_id", "specimen", "message"])


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main(prog_name="magvault"))
