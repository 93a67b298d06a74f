"""assimbench-learn: filter settings and forecast-model parameters learned by gradients through the cycle.

    assimbench-learn forecast_model=lorenz96 forecast_model.forcing=7 filter.inflation=1.03 \\
        'learn.parameters=[forecast_model.forcing]' cycles=600 burn_in=100 replicates=2 study=studies/forcing

Takes the main command's overrides (or ``--config-path DIR --config-name NAME``) and the study's keys
(:mod:`assimbench.learning.study`). ``learn.mode=fit`` steps the learned quantities down the gradient
of the chosen objective, one line per step, and writes ``learned.yaml`` (a ready-to-run experiment),
``learning.csv`` and ``learning_curve.png`` into the study folder; ``learn.mode=windows`` measures the
gradient over windows of several lengths, to choose the window. Exit status: 0 done; 1 a fit stopped on
a non-finite objective or gradient (named; the history and curve are written, no learned.yaml); 2 bad
input, one line on stderr, nothing written.
"""

import os
import sys
import time

import jax
import numpy as np
from omegaconf import OmegaConf

from assimbench.commands._hydra import compose_jobs, fail, prepare_hydra, user_config_arguments
from assimbench.compile_cache import switch_on as switch_on_compile_cache
from assimbench.config.checks import ConfigError
from assimbench.io.atomic import unwritable
from assimbench.learning.checks import check_runs, check_warnings
from assimbench.learning.learnables import free_values
from assimbench.learning.loop import learn, summarise
from assimbench.learning.outputs import OBJECTIVE_WORDS, write_fit, write_windows
from assimbench.learning.study import LEARNABLE_FILTERS, check_experiment, split_arguments, study_folder
from assimbench.learning.windows import make_gradient_pass, make_twin_data
from assimbench.report.words import setting_word, value_text
from assimbench.twin.cycling import replicate_keys

COMMAND = "assimbench-learn"
USAGE = (__doc__.split("\n\n")[0] + "\n\n" + __doc__.split("\n\n")[1] + """

The study's own keys (defaults in brackets):
  learn.parameters=[key,...]       what to learn: traced filter settings (filter.inflation,
                                   filter.radius, ...), assumed errors (assumed.error_std) or
                                   forecast-model parameters (forecast_model.forcing); each starts
                                   from its configured value
  learn.objective=innovation|truth [innovation]  observations only, or the analysis RMSE
  learn.window=K [10]              cycles per window of the gradient
  learn.iterations=N [40]          optimizer steps
  learn.rate=F [0.2]               step size on the unconstrained values (cosine decay)
  learn.optimizer=adam|sgd [adam]
  learn.nonfinite=stop|skip [stop] a window whose gradient is not finite: stop, or leave it out
  learn.mode=fit|windows [fit]     learn, or measure the gradient against the window length
  learn.windows=[1,2,5,10,20,40]   the window lengths of learn.mode=windows
  study=PATH [learning]            the folder of the study's files

Every key of the main command is accepted too (the experiment: cycles, burn_in, replicates, seed,
the filter, the forecast model...). Filters: etkf, letkf, ensrf, enkf, denkf, enkfn; 3dvar and 4dvar
with learn.objective=truth. Files written into the study folder: learned.yaml (run it with
assimbench --config-path STUDY --config-name learned), learning.csv, checks.csv, learning_curve.png;
with learn.mode=windows: window_gradients.csv, window_gradients.png.""").replace("``", "")


def prepare(argv: list) -> tuple:
    """(cfg, plan, learnables, options, folder): everything checked before anything runs."""
    rest, options = split_arguments(argv)
    _, jobs = compose_jobs(user_config_arguments(rest, "config"))
    if len(jobs) != 1:
        raise ConfigError("a learning study is one experiment: give one value per key (no comma lists)")
    cfg = jobs[0]
    plan, learnables = check_experiment(cfg, options)
    folder = study_folder(options)
    problem = unwritable(folder)
    if problem:
        raise ConfigError(f"{problem}; choose another study=")
    return cfg, plan, learnables, options, folder


def check_compiles(plan, program, free, data):
    """Compile ``program`` and return the compiled executable (called in its place, so the work is done
    once); ConfigError when the filter cannot be differentiated (a loop whose length
    depends on the data, a non-differentiable operation)."""
    try:
        return program.lower(free, data, plan.settings).compile()
    except Exception as err:  # noqa: BLE001 - JAX reports a non-differentiable step by several types
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        loop = "while_loop" in first or "fori_loop" in first
        why = ("its analysis runs a loop until it converges, which reverse-mode differentiation does not go "
               "through" if loop else f"JAX: {first}")
        raise ConfigError(f"filter={plan.choice.filter.name} cannot be differentiated through the cycle: {why}; "
                          f"choose one of {LEARNABLE_FILTERS}") from None


def _values_text(learnables, values) -> str:
    return ", ".join(f"{setting_word(item.key)} {v:.5g}" for item, v in zip(learnables, values))


def inert_note(learnables, step) -> str | None:
    """A line naming the quantities whose gradient is exactly 0 in every window (they do not act on the
    objective over such windows), or None."""
    inert = [setting_word(item.key) for j, item in enumerate(learnables)
             if step.used and step.gradient[j] == 0.0 and step.gradient_error[j] == 0.0]
    if not inert:
        return None
    return (f"  note: the gradient with respect to {', '.join(inert)} is exactly 0 in every window: it does not act on "
            "this objective over such windows (a setting the filter does not use, or one that acts only through "
            "later forecasts in a window of one cycle)")


def step_line(learnables, total: int):
    def report(step):
        head = f"step {step.iteration:>3}/{total}"
        if step.used == 0 or not np.isfinite(step.objective):
            where = (f"; first in replicate {step.first_nonfinite[0]}, window {step.first_nonfinite[1]}"
                     if step.first_nonfinite else "")
            print(f"{head}: NON-FINITE objective or gradient in {step.nonfinite} window"
                  f"{'s' if step.nonfinite != 1 else ''}{where}; at {_values_text(learnables, step.values)}",
                  flush=True)
            return
        gradients = ", ".join(f"{g:+.3g} +- {e:.2g}" for g, e in zip(step.gradient, step.gradient_error))
        skipped = f"; {step.nonfinite} non-finite windows left out" if step.nonfinite else ""
        print(f"{head}: objective {step.objective:.5f}; {_values_text(learnables, step.values)}; "
              f"gradient {gradients}{skipped} ({step.seconds:.2f} s)", flush=True)
        note = inert_note(learnables, step) if step.iteration == 0 else None
        if note:
            print(note, flush=True)

    return report


def _header(plan, learnables, options, start) -> None:
    windows = (plan.cycles - plan.burn_in) // options.window
    print(f"{COMMAND}: {plan.title}")
    print(f"  learning {', '.join(item.key for item in learnables)} from {_values_text(learnables, start)}; "
          f"objective: {OBJECTIVE_WORDS[options.objective]}"
          + (" (observations only)" if options.objective == "innovation" else " (needs the truth)"))
    print(f"  {windows} windows of {options.window} cycles x {plan.replicates} replicate"
          f"{'s' if plan.replicates > 1 else ''} after {plan.burn_in} burn-in cycles; {options.optimizer}, rate "
          f"{options.rate:g}, {options.iterations} step{'s' if options.iterations != 1 else ''}; unconstrained: "
          + ", ".join(f"{setting_word(i.key)} {i.described}" for i in learnables), flush=True)


def verdict(gradient: float, error: float) -> str:
    """How a learned value ended: no effect (gradient 0 in every window), settled (its 95% interval
    holds 0), or still sloped."""
    if gradient == 0.0 and error == 0.0:
        return "gradient 0 in every window: it does not act on this objective here, so nothing was learned"
    if abs(gradient) <= 1.96 * error:
        return f"gradient {gradient:+.3g} +- {error:.2g}: settled"
    return f"gradient {gradient:+.3g} +- {error:.2g}: still sloped: more steps or a larger rate"


def stopped_advice(history, learnables, options) -> str:
    """What to do after a fit stopped on non-finite windows."""
    good = [s for s in history.steps if np.isfinite(s.objective) and s.nonfinite == 0]
    first = history.steps[-1]
    if first.iteration == 0 and first.used == 0:
        return ("every window is non-finite at the starting values: the filter blows up there; start where it "
                "runs (a main-command run at these values shows it)")
    advice = "; a smaller learn.rate or learn.window keeps the filter from diverging"
    if options.nonfinite == "stop":
        advice = "; learn.nonfinite=skip leaves such windows out (counted)" + advice
    return (f"the last finite step ran at {_values_text(learnables, good[-1].values)}" if good else "") + advice


def run_fit(cfg, plan, learnables, options, folder) -> int:
    start = [float(OmegaConf.select(cfg, item.key)) for item in learnables]

    def compiled(program, free, data):
        executable = check_compiles(plan, program, free, data)  # refusals before anything is printed
        _header(plan, learnables, options, start)
        return executable

    _, history = learn(cfg, plan, learnables, options, report=step_line(learnables, options.iterations),
                       compiled=compiled)
    finished = history.stopped is None
    last = history.steps[-1]
    checks = None
    if finished:
        print("learned (the gradient at the learned values, +- its standard error over windows):")
        for j, item in enumerate(learnables):
            print(f"  {item.key}={value_text(float(last.values[j]))}  ("
                  f"{verdict(last.gradient[j], last.gradient_error[j])})")
        checks = check_runs(cfg, [item.key for item in learnables], start, last.values)
        print_checks(learnables, checks)
    written = write_fit(folder, cfg, learnables, history, options.objective, finished, checks)
    if not finished:
        print(f"{COMMAND}: stopped at {history.stopped}; no learned.yaml written; "
              + stopped_advice(history, learnables, options).lstrip("; "), file=sys.stderr)
    print(f"study: {folder}  ({', '.join(os.path.basename(p) for p in written)})")
    return 0 if finished else 1


def print_checks(learnables, checks: list) -> None:
    print("check runs (the main command at these values; analysis RMSE with its 95% interval):")
    for row in checks:
        values = _values_text(learnables, [row[item.key] for item in learnables])
        lost = f"{row['lost']} of {row['replicates']} replicates lost" + (" (LOST)" if row["lost"] else "")
        ratio = f"{row['innovation_ratio']:.3f}" if np.isfinite(row["innovation_ratio"]) else "n/a"
        print(f"  {row['check'] + ':':<22} {values}; seed {row['seed']}: analysis RMSE {row['rmse_analysis']:.4f} +- "
              f"{(row['rmse_analysis_high'] - row['rmse_analysis_low']) / 2:.4f}, innovation ratio {ratio}; {lost}")
    for line in check_warnings(checks):
        print("  " + line)


def run_windows(cfg, plan, learnables, options, folder) -> int:
    start = [float(OmegaConf.select(cfg, item.key)) for item in learnables]
    free = free_values(learnables, start)
    data = make_twin_data(plan.setup, plan.settings, replicate_keys(plan.seed, plan.replicates), plan.cycles)
    measured = []
    for window in options.windows:
        windows = (plan.cycles - plan.burn_in) // window
        program = make_gradient_pass(plan.setup, learnables, options.objective, window, windows, plan.burn_in)
        program = check_compiles(plan, program, free, data)
        if not measured:  # after the first compile: a refusal comes before any output
            print(f"{COMMAND}: {plan.title}")
            print(f"  the gradient of the {OBJECTIVE_WORDS[options.objective]} at {_values_text(learnables, start)}, "
                  f"per window length (spread: the std of one window's gradient over windows and replicates)",
                  flush=True)
        started = time.perf_counter()
        losses, grads = jax.block_until_ready(program(free, data, plan.settings))
        seconds = time.perf_counter() - started
        step, _ = summarise(0, learnables, free, losses, grads, seconds, keep_finite=True)
        finite = np.isfinite(np.asarray(losses)) & np.all(np.isfinite(np.asarray(grads)), axis=-1)
        spread = step.gradient_error * np.sqrt(max(step.used, 1))
        measured.append({"window": window, "windows": windows, "seconds": seconds, "objective": step.objective,
                         "mean": step.gradient, "error": step.gradient_error, "spread": spread,
                         "nonfinite": int((~finite).sum())})
        parts = ", ".join(f"{setting_word(i.key)} {g:+.3g} +- {e:.2g} (spread {s:.3g})"
                          for i, g, e, s in zip(learnables, step.gradient, step.gradient_error, spread))
        bad = f"; {int((~finite).sum())} non-finite windows left out" if (~finite).any() else ""
        print(f"  window {window:>4} cycles ({windows} x {plan.replicates}): {parts}{bad} ({seconds:.2f} s)",
              flush=True)
        note = inert_note(learnables, step)
        if note:
            print(note, flush=True)
    written = write_windows(folder, learnables, measured, options.objective)
    print(f"study: {folder}  ({', '.join(os.path.basename(p) for p in written)})")
    return 0


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if any(a in ("-h", "--help") for a in argv):
        print(USAGE)
        return 0
    prepare_hydra()
    try:
        cfg, plan, learnables, options, folder = prepare(argv)
        switch_on_compile_cache()
        if options.mode == "windows":
            return run_windows(cfg, plan, learnables, options, folder)
        return run_fit(cfg, plan, learnables, options, folder)
    except ConfigError as err:
        return fail(COMMAND, str(err))


if __name__ == "__main__":
    sys.exit(main())
