"""Console script ``assimbench-vectors``: reference vectors that prove a port computes the same analysis.

    assimbench-vectors write [main command's overrides] [vectors.count=K] [output=FILE]
    assimbench-vectors check VECTORS PORT [--tolerance NAME=VALUE]... [--any-member-order] [--table FILE]

``write`` runs the experiment of the main command's overrides (or ``--config-path DIR
--config-name NAME``) and records, at K cycles spread over the run (or at ``vectors.at=[c1,c2,...]``),
every input of the analysis step, the random numbers it drew, its intermediates and its analysis
(:mod:`assimbench.vectors`). ``check`` compares a port's file of the same layout, quantity by
quantity and cycle by cycle, and names the first quantity and cycle where it departs.

Exit status: 0 every compared quantity within its tolerance; 1 one or more outside it; 2 bad input
(a config that cannot give vectors, a foreign, corrupt or mismatched file), one line on stderr and
nothing written.
"""

import argparse
import os
import sys

import h5py
import numpy as np

from assimbench.commands._hydra import compose_jobs, fail, prepare_hydra, user_config_arguments
from assimbench.compile_cache import switch_on as switch_on_compile_cache
from assimbench.config.checks import ConfigError
from assimbench.io.atomic import unwritable, write_text
from assimbench.vectors.comparison import compare
from assimbench.vectors.quantities import QUANTITIES, path_of
from assimbench.vectors.vector_file import FILE_KIND, VectorsFileError, read_port, read_vectors
from assimbench.vectors.writing import write

COMMAND = "assimbench-vectors"
WRITE_DETAILS = """
write's own keys: vectors.count=K [5] cycles spread over the run, the last at its end;
vectors.at=[c1,c2,...] the cycles themselves; output=FILE [vectors.h5]. Filters with vectors:
etkf, letkf, ensrf, enkf, 3dvar, sir (any inflation pieces)."""
EXIT_FAILED = 1
DEFAULT_OUTPUT = "vectors.h5"
# The main config's own default output names a result file; a vectors file gets its own name.
RESULT_DEFAULT = "result.h5"


def split_write_arguments(argv: list) -> tuple:
    """(the main command's arguments, count, at, output given or None) of ``write``."""
    rest, count, at, output = [], 5, None, None
    for item in argv:
        key, equals, value = item.partition("=")
        if not equals or not key.startswith("vectors."):
            if item in ("-m", "--multirun"):
                raise ConfigError("vectors hold one experiment: drop -m and the comma lists")
            if equals and key.lstrip("+") == "output":
                if value in ("null", "None", ""):
                    raise ConfigError(f"output={value} is not allowed: the vectors file's name (default {DEFAULT_OUTPUT})")
                output = value
            if equals and "," in value and not value.startswith("["):
                raise ConfigError(f"{item}: vectors hold one experiment: give one value per key (no comma lists)")
            rest.append(item)
            continue
        if key == "vectors.count":
            try:
                count = int(value)
            except ValueError:
                raise ConfigError(f"vectors.count={value} is not allowed: an integer >= 1 (cycles recorded)") from None
        elif key == "vectors.at":
            try:
                at = [float(v) for v in value.strip("[]").split(",") if v.strip()]
            except ValueError:
                raise ConfigError(f"vectors.at={value} is not allowed: a list of cycle numbers, e.g. "
                                  "'vectors.at=[100,200]'") from None
        else:
            raise ConfigError(f"{key} is not a key of assimbench-vectors write; its own keys: vectors.count, "
                              "vectors.at")
    if not any(item.partition("=")[0].lstrip("+") == "burn_in" for item in rest):
        rest.append("burn_in=0")  # vectors keep no time means; the default burn-in would exceed a short run
    return rest, count, at, output


def run_write(argv: list) -> int:
    prepare_hydra()
    try:
        rest, count, at, output = split_write_arguments(argv)
        args, jobs = compose_jobs(user_config_arguments(rest, "config"))
        if len(jobs) != 1:
            raise ConfigError("vectors hold one experiment: give one value per key (no comma lists)")
        cfg = jobs[0]
        if output is None:
            output = str(cfg.output) if cfg.get("output") not in (None, RESULT_DEFAULT) else DEFAULT_OUTPUT
        refuse_output(output)
        switch_on_compile_cache()
        path, cycles = write(cfg, output, count, at)
    except ConfigError as err:
        return fail(COMMAND, str(err))
    vectors = read_vectors(path)
    members = int(vectors.attrs["members"])
    print(f"{COMMAND}: wrote {path}")
    print(f"  filter {vectors.attrs['filter']}, {members} member{'s' if members > 1 else ''}, state size "
          f"{vectors.attrs['state_size']}, {vectors.attrs['observation_count']} observations; seed "
          f"{vectors.attrs['seed']}, cycles {', '.join(str(c) for c in cycles)}")
    print(f"  compared quantities, in the order computed: {', '.join(vectors.order)}")
    print(f"  check a port with: {COMMAND} check {os.path.relpath(path)} PORT.h5")
    if "resampled" in vectors.arrays and not np.any(vectors.arrays["resampled"]):
        print("  note: no recorded cycle resampled, so the resampling offset and jitter draws are unused; record "
              "other cycles (vectors.at) or raise filter.ess_threshold to cover resampling")
    return 0


def refuse_output(output: str) -> None:
    """ConfigError when ``output`` cannot be written, or is an existing file that is not a vectors file
    (an existing vectors file is replaced)."""
    why = unwritable(os.path.dirname(os.path.abspath(output)))
    if why is not None:
        raise ConfigError(why)
    if os.path.isdir(output):
        raise ConfigError(f"output={output} is a folder; give a file name")
    if os.path.exists(output):
        try:
            with h5py.File(output, "r") as f:
                kind = f.attrs.get("file_kind")
        except OSError:
            kind = None
        if kind != FILE_KIND:
            raise ConfigError(f"output={output} exists and is not a vectors file; it is not overwritten")


def parse_tolerances(items: list) -> dict:
    """NAME=VALUE pairs: NAME a quantity (bare, or with its group as the check prints it) or all."""
    tolerances = {}
    for item in items:
        name, equals, value = item.partition("=")
        name = name.strip().rpartition("/")[2]
        try:
            tolerance = float(value) if equals else -1.0
        except ValueError:
            tolerance = -1.0
        if not name or not tolerance >= 0.0:
            raise VectorsFileError(f"--tolerance {item} is not allowed: NAME=VALUE with NAME a quantity (e.g. "
                                   "analysis_ensemble) or all, and VALUE a relative tolerance >= 0")
        if name in QUANTITIES and QUANTITIES[name].integer:
            raise VectorsFileError(f"--tolerance {item} is not allowed: {name} is an integer quantity, compared exactly")
        tolerances[name] = tolerance
    return tolerances


def refuse_table(table: str) -> None:
    """VectorsFileError when the CSV table cannot be written at ``table``."""
    folder = os.path.dirname(os.path.abspath(table))
    if os.path.isdir(table):
        raise VectorsFileError(f"--table {table} is a folder; give a file name")
    if not os.path.isdir(folder):
        raise VectorsFileError(f"--table {table}: the folder {folder} does not exist")
    why = unwritable(folder)
    if why is not None:
        raise VectorsFileError(why)


def check_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog=f"{COMMAND} check",
        description="Check a port's file (HDF5 or netCDF-4: the compared quantities at the vectors' paths and shapes, "
                    "e.g. /outputs/analysis_ensemble) against vectors. Exit status 0 all within tolerance, 1 a "
                    "quantity outside it, 2 bad input.",
        epilog="Default tolerances: 1e-9 of each quantity's scale (1e-8 for the 3D-Var cost, gradient and analysis), "
               "integer quantities exact.")
    parser.add_argument("vectors", help="the vectors file (assimbench-vectors write)")
    parser.add_argument("port", help="the port's file: the compared quantities at the same paths and shapes")
    parser.add_argument("--tolerance", action="append", default=[], metavar="NAME=VALUE",
                        help="relative tolerance of one quantity, or of all float quantities (all=VALUE)")
    parser.add_argument("--any-member-order", action="store_true",
                        help="the port's members come in another order: compare only order-free quantities")
    parser.add_argument("--table", metavar="FILE", help="also write every row as CSV")
    return parser


def run_check(argv: list) -> int:
    args = check_parser().parse_args(argv)
    try:
        vectors = read_vectors(args.vectors)
        port, ignored = read_port(args.port, vectors)
        if args.table is not None:
            refuse_table(args.table)
        report = compare(vectors, port, parse_tolerances(args.tolerance), args.any_member_order)
    except (VectorsFileError, ValueError) as err:
        return fail(COMMAND, str(err))
    if args.table is not None:
        write_text(args.table, table_csv(report))
    lines = report_lines(vectors, report, args)
    if ignored:
        lines.insert(1, f"  not quantities of these vectors (ignored; misspelt or misplaced?): {', '.join(ignored)}")
    print("\n".join(lines))
    return 0 if report.passed else EXIT_FAILED


def report_lines(vectors, report, args) -> list:
    """The check as printed: what was compared, one row per cycle and quantity, the verdict."""
    attrs = vectors.attrs
    lines = [f"{COMMAND} check: {args.port} against {args.vectors} ({attrs['filter']}, {attrs['members']} members, "
             f"cycles {', '.join(str(int(c)) for c in vectors.cycles)})"]
    if report.missing:
        lines.append(f"  not given by the port (not compared): {', '.join(report.missing)}")
    if report.unordered:
        lines.append(f"  left out (member order arbitrary): {', '.join(report.unordered)}")
    derived = sorted({row.name for row in report.rows if row.derived})
    if derived:
        lines.append(f"  derived from the port's analysis ensemble: {', '.join(derived)}")
    width = max(len(path_of(name)) for name in report.compared) + 2
    lines.append(f"  {'cycle':>6}  {'quantity':<{width}}{'max abs error':>14}{'max rel error':>15}{'tolerance':>11}  verdict")
    for row in report.rows:
        verdict = "pass" if row.passed else "FAIL"
        lines.append(f"  {row.cycle:>6}  {row.path:<{width}}{row.absolute:>14.3e}{row.relative:>15.3e}"
                     f"{row.tolerance:>11.1e}  {verdict}")
    first = report.first_failure
    if first is None:
        worst = max(report.rows, key=lambda row: row.relative)
        lines.append(f"PASSED: {len(report.compared)} quantities at {len(vectors.cycles)} cycles within their "
                     f"tolerances (largest relative error {worst.relative:.2e}, {worst.path} at cycle {worst.cycle})")
    else:
        failing = sorted({row.name for row in report.failures}, key=report.compared.index)
        error = "not finite" if not np.isfinite(first.relative) else f"{first.relative:.3e}"
        lines.append(f"FAILED: the port first departs at cycle {first.cycle} in {first.path}: relative error {error} "
                     f"> tolerance {first.tolerance:.1e} ({QUANTITIES[first.name].formula}); failing at some cycle: "
                     f"{', '.join(failing)}")
    return lines


def table_csv(report) -> str:
    rows = ["cycle,quantity,max_abs_error,max_rel_error,tolerance,passed,derived"]
    rows += [f"{r.cycle},{r.path},{r.absolute:.6e},{r.relative:.6e},{r.tolerance:.3e},{int(r.passed)},{int(r.derived)}"
             for r in report.rows]
    return "\n".join(rows) + "\n"


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    usage = __doc__.replace("``", "").replace(":mod:", "").replace("`", "")
    if not argv or argv[0] in ("-h", "--help"):
        print(usage)
        return 0 if argv else 2
    action, rest = argv[0], argv[1:]
    if action == "write":
        if any(a in ("-h", "--help") for a in rest):
            print(usage + WRITE_DETAILS)
            return 0
        return run_write(rest)
    if action == "check":
        return run_check(rest)
    return fail(COMMAND, f"{action} is not an action; the actions: write, check")


if __name__ == "__main__":
    sys.exit(main())
