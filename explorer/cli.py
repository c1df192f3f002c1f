"""fulcrum analyse | validate | demo | app | check-methods | patient | plan: a thin shell over the engine."""
from __future__ import annotations

import argparse
import dataclasses
import os
import subprocess
import sys
from importlib import resources
from pathlib import Path

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10: the same parser, published as tomli
    import tomli as tomllib

from . import CAUTIONS, __version__
from . import results as res
from .analysis import analyse
from .cohort import load_cohort
from .demo import SEED, write_demo
from .errors import FulcrumError, printable
from .fitting import fit_all
from .indices import compute_index, needed_columns
from .margins import side_words
from .numeric import captured
from .outputs import OutputPlan, input_paths, os_error
from .patient import patient_document, patient_lines, place_patient
from .planner import Target, plan_study
from .progress import ProgressBar
from .policy import text_table
from .reference_check import check_reference
from .reference_check import table as reference_table
from .settings import advice, check_analysis, check_setting
from .spec import load_spec
from .coverage_study_cli import main as validation_main
from .words import interval_words, row_bounds


def _fmt(v: float | None) -> str:
    return "open" if v is None else f"{v:.3g}"


def summary_table(doc: dict) -> str:
    """The readable table `fulcrum analyse` prints: one line per outcome x index (and composite)."""
    arms = doc["arms"]
    head = ["outcome", "index", "measure", "break-even [interval]", "favoured below / above", "clear difference"]
    lines = []
    for row in doc["results"] + doc.get("composite", []):
        m = float(row.get("margin") or 0.0)
        if row["break_even"]:
            be = "; ".join(f"{b['x']:.3g} [{interval_words(b, row_bounds(row))}]"
                           + (" (extrapolated)" if b["extrapolated"] else "") for b in row["break_even"])
            fav = "; ".join(f"{side_words(b['favours_below'], arms, m)} / {side_words(b['favours_above'], arms, m)}"
                            for b in row["break_even"])
        else:
            be = "none in range"
            fav = f"{side_words(row['favours_throughout'], arms, m)} throughout"
        clear = "; ".join(f"{r['from']:.3g}-{r['to']:.3g} {side_words(r['favours'], arms, m)}"
                          for r in row["clear_difference"]) or "none"
        lines.append([row["outcome"], row["index"], row["measure"], be, fav, clear])
    lines = [[printable(c) for c in line] for line in lines]
    widths = [max(len(str(x)) for x in col) for col in zip(head, *lines)]
    out = [f"Arms: {printable(arms[0])} (first) minus {printable(arms[1])} (second); higher is better.",
           "  ".join(h.ljust(w) for h, w in zip(head, widths)),
           "  ".join("-" * w for w in widths)]
    out += ["  ".join(str(c).ljust(w) for c, w in zip(r, widths)) for r in lines]
    abouts = dict.fromkeys((r.get("index_info") or {}).get("about") for r in doc["results"] + doc.get("composite", []))
    out += ["", *(f"Index: {printable(a)}" for a in abouts if a)]
    out += evidence_lines(doc)
    out.append("")
    out.append("Caution: " + " ".join(CAUTIONS))
    return "\n".join(out)


def with_flags(spec, args: argparse.Namespace, flags: dict[str, str]):
    """The spec with the settings given on the command line, checked by the same rules as the spec's own
    (explorer.settings); flags maps each setting to its flag, e.g. {"replicates": "--replicates"}."""
    given = {key: getattr(args, key) for key in flags if getattr(args, key, None) is not None}
    if not given:
        return spec
    analysis = dataclasses.replace(spec.analysis, **given)
    check_analysis(analysis, source=spec.source, flags={k: flags[k] for k in given})
    return dataclasses.replace(spec, analysis=analysis)


def say_warnings(spec) -> list[str]:
    """Warnings about allowed but weak settings (too many workers, few replicates)."""
    return advice(spec.analysis)


def evidence_lines(doc: dict) -> list[str]:
    """Where more evidence would change the answer: one line per evidence row that rises above its threshold."""
    rows = [r for r in doc.get("evidence", []) if r["above_threshold"]]
    if not doc.get("evidence"):
        return []
    out = ["", "Where more evidence would change the answer (expected value of perfect information):"]
    if not rows:
        out.append("  nowhere along any index does it exceed the threshold.")
    for r in rows:
        name = r["outcome"] if r["kind"] is None else f"composite ({r['kind']})"
        out.append(f"  {printable(name)} along {printable(r['index'])}: {printable(r['sentence'])}")
    return out


def cmd_analyse(args: argparse.Namespace) -> int:
    spec = load_spec(args.spec)
    spec = with_flags(spec, args, {"replicates": "--replicates", "scheduler": "--scheduler"})
    plan = args.plan.inputs_from(args.spec, *input_paths(spec))
    json_out, html_out = plan.add("--json", args.json), plan.add("--html", args.html)
    spec_bytes = read_input(args.spec)
    early = say_warnings(spec)
    if not args.quiet:
        for w in early:
            print(f"warning: {printable(w)}", file=sys.stderr)
    bar = ProgressBar("bootstrap") if spec.analysis.interval == "bootstrap" and not args.quiet else None
    result = analyse(spec, _load(spec, args), spec_bytes=spec_bytes, progress=bar)
    reference = check_reference(result.fitset) if args.check_reference else None
    if reference is not None:
        result.document["reference_check"] = reference.as_dict()
    # both documents are made before either is written, so a failure leaves no half set of files
    json_text = res.dumps(result.document) + "\n" if json_out else None
    html_text = None
    if html_out:
        from .report import render_report

        html_text = render_report(result)
    plan.write(json_out, json_text)
    plan.write(html_out, html_text)
    if not args.quiet:
        print(summary_table(result.document))
        if result.document.get("policy"):
            print(text_table(result.document))
        for line in warning_lines(result.document):
            print(line)
        if reference is not None:
            print()
            print(reference_table(reference))
    if reference is not None and not reference.agrees:
        print("fulcrum: the reference check found models that differ from lifelines or statsmodels beyond the "
              "tolerance: " + "; ".join(f"{m.outcome} along {m.index}, {m.arm} ({m.model}: {m.worst or m.note})"
                                         for m in reference.disagreeing), file=sys.stderr)
        return 1
    return 0


def warning_lines(doc: dict) -> list[str]:
    """The population the headline rests on, then every warning: the document's, each row's and each check's."""
    pop = doc.get("population")
    out = [] if not pop else [f"population: the headline rows rest on {pop['words']} ({pop['reason']})."]
    seen = set(doc["warnings"])
    out += [f"warning: {printable(w)}" for w in doc["warnings"]]
    for group, tag in ((doc["results"] + doc.get("composite", []), "warning"), (doc.get("checks", []), "check")):
        for row in group:
            for w in row.get("warnings", []):
                if w not in seen:
                    seen.add(w)
                    out.append(f"{tag}: {printable(w)}")
    return out


def _at_value(text: str) -> tuple[str, float]:
    name, sep, value = text.partition("=")
    try:
        if not sep or not name.strip():
            raise ValueError
        return name.strip(), float(value)
    except ValueError:
        raise FulcrumError(f"--at '{text}' should be INDEX=VALUE, e.g. --at cfs=6.", key="--at",
                           hint="Name one index of the spec and a number.") from None


def cmd_plan(args: argparse.Namespace) -> int:
    spec = load_spec(args.spec)
    json_out = args.plan.inputs_from(args.spec, *input_paths(spec)).add("--json", args.json)
    index = args.index or spec.indices[0].name
    at = None
    if args.at:
        name, at = _at_value(args.at)
        if args.index and name != args.index:
            raise FulcrumError(f"--at names index '{name}' but --index is '{args.index}'.", key="--at",
                               hint="Use the same index for both.")
        index = name
    if index not in [ix.name for ix in spec.indices]:
        raise FulcrumError(f"the spec has no index '{index}'.", key="--index",
                           hint=f"Use one of {', '.join(ix.name for ix in spec.indices)}.")
    outcome = args.outcome or spec.outcomes[0].name
    if outcome not in [o.name for o in spec.outcomes]:
        raise FulcrumError(f"the spec has no outcome '{outcome}'.", key="--outcome",
                           hint=f"Use one of {', '.join(o.name for o in spec.outcomes)}.")
    for flag, v, lo, hi in (("--target-width", args.target_width, 0.0, float("inf")),
                            ("--target-chance", args.target_chance, 0.0, 1.0)):
        if v is not None and not (lo < v <= hi if hi == 1.0 else lo < v < hi):
            raise FulcrumError(f"{flag} is {v:g}; it must be above {lo:g}" + (f" and at most {hi:g}." if hi == 1.0
                               else "."), key=flag, hint="For example --target-width 1.5 or --target-chance 0.8.")
    if args.simulations is not None and args.simulations < 20:
        raise FulcrumError(f"--simulations is {args.simulations}; use at least 20 per strategy and size.",
                           key="--simulations", hint="The default is 200.")
    if args.sizes and any(n < 10 for n in args.sizes):
        raise FulcrumError("--sizes should be numbers of new patients of at least 10.", key="--sizes",
                           hint="For example --sizes 200 500 1000.")
    target = Target(width=args.target_width, chance=args.target_chance, at=at)
    fs = fit_all(spec, _load(spec, args))
    bar = None if args.quiet else ProgressBar("simulated studies")
    doc = plan_study(fs, outcome, index, target, sizes=args.sizes, simulations=args.simulations, progress=bar)
    args.plan.write(json_out, res.dumps(doc) + "\n" if json_out else None)
    if not args.quiet:
        print(plan_table(doc))
    return 0


def plan_table(doc: dict) -> str:
    """The readable table `fulcrum plan` prints."""
    t = doc["today"]
    ci = t["ci"] or [None, None]
    lines = [f"Target: {printable(doc['target']['words'])}.",
             f"Today: {printable(doc['outcome'])} along {printable(doc['index'])}, break-even "
             f"{_fmt(t['break_even'])} [{_fmt(ci[0])}, {_fmt(ci[1])}] ({sum(t['n'].values())} patients).",
             f"{'strategy':<20} {'new patients':>12} {'median width':>13} {'chance':>12}"]
    for r in doc["rows"]:
        chance = "" if r["chance"] is None else f"{100 * r['chance']:.0f}% +/- {100 * r['chance_se']:.0f}"
        lines.append(f"{r['strategy']:<20} {r['new_patients']:>12} {_fmt(r['width']):>13} {chance:>12}")
    lines += ["", *doc["summary"], "", "Caution: " + " ".join(CAUTIONS)]
    return "\n".join(lines)


def cmd_patient(args: argparse.Namespace) -> int:
    spec = load_spec(args.spec)
    json_out = args.plan.inputs_from(args.spec, *input_paths(spec)).add("--json", args.json)
    values = {}
    for item in args.at or []:
        name, sep, text = item.partition("=")
        try:
            values[name.strip()] = float(text)
        except ValueError:
            raise FulcrumError(f"--at {item!r} should be NAME=NUMBER.",
                               hint="For example --at cfs=6 --at age=82.") from None
        if not sep or not name.strip():
            raise FulcrumError(f"--at {item!r} should be NAME=NUMBER.", hint="For example --at cfs=6 --at age=82.")
    fs = fit_all(spec, _load(spec, args))
    numeric: list[str] = []
    with captured(numeric, "placing the patient"):
        view = place_patient(fs, values)
    doc = patient_document(fs, view, CAUTIONS, numeric)
    args.plan.write(json_out, res.dumps(doc) + "\n" if json_out else None)
    for line in patient_lines(doc):
        print(printable(line))
    return 0


def read_input(path: str | Path) -> bytes:
    """An input file's bytes; an unreadable file becomes a located FulcrumError."""
    try:
        return Path(path).read_bytes()
    except OSError as exc:
        raise os_error(exc, path, "read the file") from None


def _load(spec, args: argparse.Namespace):
    """The spec's cohort; a database server is contacted only with --allow-connect."""
    return load_cohort(spec, extra_columns=needed_columns(spec), allow_connect=args.allow_connect)


def cmd_validate(args: argparse.Namespace) -> int:
    spec = load_spec(args.spec)
    cohort = _load(spec, args)
    warnings = say_warnings(spec) + list(cohort.warnings)
    with captured(warnings, "computing the indices"):
        for ix in spec.indices:
            warnings.extend(compute_index(ix, cohort.frame, spec=spec).warnings)
    print(f"{printable(cohort.name)}: {len(cohort.frame)} patients, sha256 {cohort.sha256[:12]}...")
    print(cohort.counts().to_string())
    for n in cohort.notes:
        print(f"note: {printable(n)}")
    for w in warnings:
        print(f"warning: {printable(w)}")
    print("The spec and cohort passed every check" + (" (with warnings)." if warnings else "."))
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    if not 20 <= args.n <= 1_000_000:
        raise FulcrumError(f"--n is {args.n}; the demo needs 20 to 1,000,000 patients.",
                           hint="For example --n 2400 (the default).")
    seed = SEED if args.seed is None else args.seed
    check_setting("seed", seed, flags={"seed": "--seed"})
    path = write_demo(Path(args.dir), n=args.n, seed=seed)
    print(f"Wrote the invented demo cohort and its spec: {path}")
    print(f"Next: fulcrum analyse {path} --json results.json --html report.html")
    return 0


UPLOAD_MB = (1, 4096)  # the app's per-file upload limit that `fulcrum app --max-upload-mb` accepts, in MB


def streamlit_flags(address: str | None, port: int | None, max_upload_mb: int | None = None) -> list[str]:
    """The project's Streamlit settings as command-line flags, so they hold from any folder."""
    text = resources.files("explorer.app_settings").joinpath("config.toml").read_text()
    flags = []
    for section, table in tomllib.loads(text).items():
        for key, value in table.items():
            v = str(value).lower() if isinstance(value, bool) else str(value)
            flags.append(f"--{section}.{key}={v}")
    if address:
        flags.append(f"--server.address={address}")
    if port:
        flags.append(f"--server.port={port}")
    if max_upload_mb:
        flags.append(f"--server.maxUploadSize={max_upload_mb}")
    return flags


# `streamlit run` in this process, while a background thread imports the engine (about five seconds of the first
# page on a fresh server, spent instead while the server starts); the first session then finds it imported.
LAUNCH = ("import runpy, sys, threading\n"
          "threading.Thread(target=__import__, args=('explorer.appstate',), daemon=True).start()\n"
          "sys.argv = ['streamlit', 'run', *sys.argv[1:]]\n"
          "runpy.run_module('streamlit', run_name='__main__', alter_sys=True)\n")


def cmd_app(args: argparse.Namespace) -> int:
    if args.port is not None and not 1 <= args.port <= 65535:
        raise FulcrumError(f"--port is {args.port}; a port is a number from 1 to 65535.",
                           hint="For example --port 8501.")
    lo, hi = UPLOAD_MB
    if args.max_upload_mb is not None and not lo <= args.max_upload_mb <= hi:
        raise FulcrumError(f"--max-upload-mb is {args.max_upload_mb}; the app accepts files of {lo} to {hi} MB.",
                           hint="For example --max-upload-mb 500. A larger cohort: use Parquet, a database, "
                                "or `fulcrum analyse`, which reads files of any size.")
    main_script = resources.files("explorer.app_pages").joinpath("app.py")
    cmd = [sys.executable, "-c", LAUNCH, str(main_script),
           *streamlit_flags(args.address, args.port, args.max_upload_mb)]
    if args.spec:
        cmd += ["--", "--spec", str(Path(args.spec).resolve())]
    env = dict(os.environ, STREAMLIT_BROWSER_GATHER_USAGE_STATS="false")
    # each browser session runs in its own thread; glibc gives threads their own memory arenas, which keep
    # freed memory, so the server's memory creeps up with every session. Two arenas keep it near its start.
    env.setdefault("MALLOC_ARENA_MAX", "2")
    if os.name == "posix":  # become the server, so stopping `fulcrum app` stops Streamlit too
        os.execve(sys.executable, cmd, env)
    return subprocess.call(cmd, env=env)


def cmd_check_methods(args: argparse.Namespace) -> int:
    return validation_main(args.rest)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="fulcrum", description="Break-even points of two treatments along a patient "
                                "index, from cohort data.")
    p.add_argument("--version", action="version", version=f"fulcrum {__version__}")
    p.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    sub = p.add_subparsers(dest="command", required=True)

    a = sub.add_parser("analyse", aliases=["analyze"], help="run the analysis a spec describes")
    a.add_argument("spec")
    a.add_argument("--json", metavar="OUT", help="write the results document here")
    a.add_argument("--html", metavar="OUT", help="write the offline HTML report here")
    a.add_argument("--replicates", type=int, help="override analysis.replicates (20 to 100,000)")
    a.add_argument("--scheduler", metavar="tcp://HOST:PORT",
                   help="send bootstrap replicates to this Dask cluster (a spec can never name one)")
    a.add_argument("--quiet", action="store_true", help="print nothing but errors")
    a.add_argument("--check-reference", action="store_true",
                   help="refit every per-arm model with lifelines or statsmodels and report the largest differences "
                        "(exit 1 when any exceeds 1e-5 + 1e-5 x |reference|)")
    a.set_defaults(func=cmd_analyse)

    pt = sub.add_parser("patient", help="one patient's predictions, verdicts and cautions from the command line")
    pt.add_argument("spec")
    pt.add_argument("--at", action="append", metavar="NAME=VALUE",
                    help="an index value or a covariate an index uses, e.g. --at cfs=6 (repeat for more)")
    pt.add_argument("--json", metavar="OUT", help="write the patient document here")
    pt.set_defaults(func=cmd_patient)

    v = sub.add_parser("validate", help="check a spec and its cohort, print the report")
    v.add_argument("spec")
    for cmd in (a, v, pt):
        cmd.add_argument("--allow-connect", action="store_true",
                         help="allow reading the cohort from the database server the spec names (never by default)")
    v.set_defaults(func=cmd_validate)

    d = sub.add_parser("demo", help="write the invented demo cohort and its spec into DIR")
    d.add_argument("dir")
    d.add_argument("--n", type=int, default=2400, help="number of patients (default 2400)")
    d.add_argument("--seed", type=int, default=None, help="generator seed (default: the shipped one)")
    d.set_defaults(func=cmd_demo)

    s = sub.add_parser("app", help="start the app in a browser (on the demo cohort unless --spec)")
    s.add_argument("--port", type=int)
    s.add_argument("--address", help="address to bind (default 127.0.0.1)")
    s.add_argument("--spec", help="open on this spec instead of the demo")
    s.add_argument("--max-upload-mb", type=int, metavar="MB",
                   help=f"largest cohort file the app accepts, in MB (default 200; {UPLOAD_MB[0]} to {UPLOAD_MB[1]})")
    s.set_defaults(func=cmd_app)

    pl = sub.add_parser("plan", help="simulate the next study: how many more randomised patients, where, would "
                                     "settle a break-even")
    pl.add_argument("spec")
    pl.add_argument("--outcome", help="the outcome to plan for (default: the spec's first)")
    pl.add_argument("--index", help="the index (default: the spec's first)")
    goal = pl.add_mutually_exclusive_group(required=True)
    goal.add_argument("--target-width", type=float, metavar="W", help="aim: a break-even interval no wider than W")
    goal.add_argument("--target-chance", type=float, metavar="P",
                      help="aim: a clear difference at --at INDEX=VALUE with probability P")
    pl.add_argument("--at", metavar="INDEX=VALUE", help="the index value for --target-chance")
    pl.add_argument("--sizes", type=int, nargs="+", metavar="N", help="numbers of new patients to try")
    pl.add_argument("--simulations", type=int, help="simulated studies per strategy and size (default 200)")
    pl.add_argument("--json", metavar="OUT", help="write the plan document here")
    pl.add_argument("--quiet", action="store_true", help="print nothing but errors")
    pl.add_argument("--allow-connect", action="store_true",
                    help="allow reading the cohort from the database server the spec names (never by default)")
    pl.set_defaults(func=cmd_plan)

    c = sub.add_parser("check-methods", add_help=False,
                       help="measure interval coverage by simulation (writes docs/validation.*); "
                            "'fulcrum check-methods --help' lists its options")
    c.set_defaults(func=cmd_check_methods)
    return p


def main(argv: list[str] | None = None) -> int:
    """Run one command. Exit 0 on success, 2 with one located message on bad input or an operating-system
    error, 130 when stopped; a closed pipe (`fulcrum validate spec.toml | head -1`) ends quietly. A command
    that writes files plans them on `args.plan` (explorer.outputs.OutputPlan), so a stopped or failed run says
    what it wrote."""
    parser = build_parser()
    args, rest = parser.parse_known_args(argv)
    if args.command == "check-methods":
        args.rest = rest
    elif rest:
        parser.error(f"unrecognized arguments: {' '.join(rest)}")
    args.plan = OutputPlan()
    try:
        try:
            code = args.func(args)
            sys.stdout.flush()
            return code
        except OSError as exc:
            if isinstance(exc, BrokenPipeError):
                raise
            if args.debug:
                raise
            raise os_error(exc, exc.filename or "(unnamed file)", "read or write a file") from None
    except BrokenPipeError:
        # the reader of our output has gone (e.g. `| head -1`): stop quietly, and keep Python from
        # complaining when it flushes stdout at exit
        try:
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        except (OSError, AttributeError, ValueError):  # a stdout without a file behind it: nothing to flush
            pass
        return 0
    except FulcrumError as exc:
        if args.debug:
            raise
        print(f"fulcrum: {exc}", file=sys.stderr)
        if args.plan.written:
            print(f"fulcrum: {args.plan.summary()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("fulcrum: stopped." + (f" {args.plan.summary()}" if args.plan.planned else ""), file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
