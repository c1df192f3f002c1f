"""fulcrum analyse | validate | demo | app | check-methods | patient: a thin shell over the engine."""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
import tomllib
from importlib import resources
from pathlib import Path

from . import CAUTIONS, __version__
from .errors import FulcrumError, printable


class ProgressBar:
    """A one-line text progress bar on stderr."""

    def __init__(self, label: str, stream=sys.stderr) -> None:
        self.label, self.stream, self.start = label, stream, time.monotonic()

    def __call__(self, done: int, total: int) -> None:
        width = 30
        filled = int(width * done / max(total, 1))
        secs = time.monotonic() - self.start
        self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total} {secs:5.1f}s")
        if done >= total:
            self.stream.write("\n")
        self.stream.flush()


def _fmt(v: float | None) -> str:
    return "open" if v is None else f"{v:.3g}"


def _interval_words(b: dict) -> str:
    lo, hi = b["ci"]
    if b.get("interval_shape") == "two_rays":
        return f"[below {_fmt(lo)} or above {_fmt(hi)}]"
    return f"[{_fmt(lo)}, {_fmt(hi)}]"


def summary_table(doc: dict) -> str:
    """The readable table `fulcrum analyse` prints: one line per outcome x index (and composite)."""
    arms = doc["arms"]
    head = ["outcome", "index", "measure", "break-even [interval]", "favoured below / above", "clear difference"]
    lines = []
    for row in doc["results"] + doc.get("composite", []):
        if row["break_even"]:
            be = "; ".join(f"{b['x']:.3g} {_interval_words(b)} {b['interval']}"
                           + (" (extrapolated)" if b["extrapolated"] else "") for b in row["break_even"])
            fav = "; ".join(f"{b['favours_below']} / {b['favours_above']}" for b in row["break_even"])
        else:
            be = "none in range"
            fav = f"{row['favours_throughout']} throughout"
        clear = "; ".join(f"{r['from']:.3g}-{r['to']:.3g} {r['favours']}" for r in row["clear_difference"]) or "none"
        lines.append([row["outcome"], row["index"], row["measure"], be, fav, clear])
    lines = [[printable(c) for c in line] for line in lines]
    widths = [max(len(str(x)) for x in col) for col in zip(head, *lines)]
    out = [f"Arms: {printable(arms[0])} (first) minus {printable(arms[1])} (second); higher is better.",
           "  ".join(h.ljust(w) for h, w in zip(head, widths)),
           "  ".join("-" * w for w in widths)]
    out += ["  ".join(str(c).ljust(w) for c, w in zip(r, widths)) for r in lines]
    out.append("")
    out.append("Caution: " + " ".join(CAUTIONS))
    return "\n".join(out)


def cmd_analyse(args: argparse.Namespace) -> int:
    from . import results as res
    from .analysis import analyse
    from .spec import load_spec

    spec = load_spec(args.spec)
    if args.replicates:
        import dataclasses

        spec = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, replicates=args.replicates))
    if args.scheduler:
        import dataclasses

        spec = dataclasses.replace(spec, analysis=dataclasses.replace(spec.analysis, scheduler=args.scheduler))
    bar = ProgressBar("bootstrap") if spec.analysis.interval == "bootstrap" and not args.quiet else None
    result = analyse(spec, spec_bytes=Path(args.spec).read_bytes(), progress=bar)
    if args.json:
        res.write(result.document, args.json)
    if args.html:
        from .report import write_report

        write_report(result, args.html)
    if not args.quiet:
        print(summary_table(result.document))
        for line in warning_lines(result.document):
            print(line)
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


def cmd_patient(args: argparse.Namespace) -> int:
    from .analysis import fit_all
    from .numeric import captured
    from .patient import patient_document, patient_lines, place_patient
    from .spec import load_spec

    spec = load_spec(args.spec)
    values = {}
    for item in args.at or []:
        name, sep, text = item.partition("=")
        try:
            values[name.strip()] = float(text)
        except ValueError:
            raise FulcrumError(f"--at {item!r} should be NAME=NUMBER.", hint="For example --at cfs=6 --at age=82.")
        if not sep or not name.strip():
            raise FulcrumError(f"--at {item!r} should be NAME=NUMBER.", hint="For example --at cfs=6 --at age=82.")
    fs = fit_all(spec)
    numeric: list[str] = []
    with captured(numeric, "placing the patient"):
        view = place_patient(fs, values)
    doc = patient_document(fs, view, CAUTIONS, numeric)
    if args.json:
        write_json(doc, args.json)
    for line in patient_lines(doc):
        print(printable(line))
    return 0


def write_json(doc: dict, path: str) -> None:
    """Write a JSON document (one place, so the safe writer can replace it)."""
    from . import results as res

    res.write(doc, path)


def cmd_validate(args: argparse.Namespace) -> int:
    from .cohort import load_cohort
    from .indices import compute_index, needed_columns
    from .spec import load_spec

    spec = load_spec(args.spec)
    cohort = load_cohort(spec, extra_columns=needed_columns(spec))
    from .numeric import captured

    warnings = list(cohort.warnings)
    with captured(warnings, "computing the indices"):
        for ix in spec.indices:
            warnings.extend(compute_index(ix, cohort.frame, spec=spec).warnings)
    print(f"{spec.cohort.path.name}: {len(cohort.frame)} patients, sha256 {cohort.sha256[:12]}...")
    print(cohort.counts().to_string())
    for n in cohort.notes:
        print(f"note: {n}")
    for w in warnings:
        print(f"warning: {w}")
    print("The spec and cohort passed every check" + (" (with warnings)." if warnings else "."))
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from .demo import write_demo

    path = write_demo(Path(args.dir), n=args.n, seed=args.seed) if args.seed is not None else \
        write_demo(Path(args.dir), n=args.n)
    print(f"Wrote the invented demo cohort and its spec: {path}")
    print(f"Next: fulcrum analyse {path} --json results.json --html report.html")
    return 0


def streamlit_flags(address: str | None, port: int | None) -> list[str]:
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
    return flags


def cmd_app(args: argparse.Namespace) -> int:
    main_script = resources.files("explorer.app_pages").joinpath("app.py")
    cmd = [sys.executable, "-m", "streamlit", "run", str(main_script), *streamlit_flags(args.address, args.port)]
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
    from .validation import main as validation_main

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
    a.add_argument("--replicates", type=int, help="override analysis.replicates")
    a.add_argument("--scheduler", metavar="tcp://HOST:PORT", help="send bootstrap replicates to a Dask cluster")
    a.add_argument("--quiet", action="store_true", help="print nothing but errors")
    a.set_defaults(func=cmd_analyse)

    pt = sub.add_parser("patient", help="one patient's predictions, verdicts and cautions from the command line")
    pt.add_argument("spec")
    pt.add_argument("--at", action="append", metavar="NAME=VALUE",
                    help="an index value or a covariate an index uses, e.g. --at cfs=6 (repeat for more)")
    pt.add_argument("--json", metavar="OUT", help="write the patient document here")
    pt.set_defaults(func=cmd_patient)

    v = sub.add_parser("validate", help="check a spec and its cohort, print the report")
    v.add_argument("spec")
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
    s.set_defaults(func=cmd_app)

    c = sub.add_parser("check-methods", add_help=False,
                       help="measure interval coverage by simulation (writes docs/validation.*); "
                            "'fulcrum check-methods --help' lists its options")
    c.set_defaults(func=cmd_check_methods)
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args, rest = parser.parse_known_args(argv)
    if args.command == "check-methods":
        args.rest = rest
    elif rest:
        parser.error(f"unrecognized arguments: {' '.join(rest)}")
    try:
        return args.func(args)
    except FulcrumError as exc:
        if args.debug:
            raise
        print(f"fulcrum: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("fulcrum: stopped.", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
