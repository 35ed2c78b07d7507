"""Implementations of the CLI commands (one ``cmd_<name>(args) -> int`` each)."""

from __future__ import annotations

import sys
from pathlib import Path

from ._config import load_config
from ._errors import InputError, NumericalError
from ._io import check_writable, ensure_dir, read_dataset, status, write_dataset

__all__ = [
    "cmd_validate",
    "cmd_run",
    "cmd_analyze",
    "cmd_compare",
    "cmd_coefficients",
    "cmd_calibrate",
    "cmd_sweep",
    "cmd_check",
    "cmd_demo",
]


def _out(text: str) -> None:
    sys.stdout.write(text if text.endswith("\n") else text + "\n")


def _load(args):
    return load_config(args.config, overrides=args.overrides)


def cmd_validate(args) -> int:
    from ._config import config_to_toml

    cfg = _load(args)
    _out(config_to_toml(cfg))
    if args.explain:
        from ._config import Config
        from ._schema import describe

        for key, default, doc in describe(Config):
            _out(f"# {key} = {default!r}: {doc}")
    return 0


def _save_last_good(exc: NumericalError, output: Path) -> None:
    """Keep the last good state of a diverged run beside the requested output."""
    if exc.last_good is None:
        return
    path = output.with_name(output.stem + ".last_good.nc")
    write_dataset(exc.last_good, path)
    status(f"last good state written to {path}")


def cmd_run(args) -> int:
    from ._pipeline import engine_module

    cfg = _load(args)
    output = check_writable(args.output)
    simulate = engine_module(args.engine)
    try:
        ds = simulate(cfg, progress=args.progress, checkpoint=args.checkpoint,
                      resume=args.resume)
    except NumericalError as exc:
        _save_last_good(exc, output)
        raise
    except KeyboardInterrupt:
        if args.checkpoint and Path(args.checkpoint).exists():
            status(f"checkpoint {args.checkpoint} is complete; continue with "
                   f"`crossflock run ... --resume {args.checkpoint}`")
        raise
    write_dataset(ds, output)
    _out(f"wrote {output}")
    return 0


def cmd_analyze(args) -> int:
    from ._pipeline import analysis

    output = check_writable(args.output)
    ds = read_dataset(args.run_file, kind=("particles", "fields"))
    observe = analysis("observe")
    obs = observe(ds)
    write_dataset(obs, output)
    _out(f"wrote {output}")
    return 0


def cmd_coefficients(args) -> int:
    import tomli_w

    from ._kinetic import kinetic_coefficients

    cfg = _load(args)
    coef = cfg.continuum.coefficients
    if coef == "kinetic":
        table = kinetic_coefficients(cfg)
        header = ("# Bertin-Droz-Gregoire kinetic coefficients at rho0 = "
                  f"{cfg.model.density:g} (an approximation; see README, Background)\n")
    else:
        from ._schema import to_mapping

        table = to_mapping(coef)
        header = "# coefficient table given in the config\n"
    _out(header + tomli_w.dumps({"continuum": {"coefficients": table}}))
    return 0


def cmd_compare(args) -> int:
    from ._compare_run import run_compare

    cfg = _load(args)
    result = run_compare(cfg, args.output, progress=args.progress,
                         coefficients_file=args.coefficients)
    return 1 if result.verdict == "fails" else 0


def cmd_demo(args) -> int:
    from ._compare_run import run_compare
    from ._scenarios import scenario_path

    cfg = load_config(scenario_path("default"))
    result = run_compare(cfg, args.output, progress=args.progress)
    _out(f"demo finished: verdict {result.verdict!r}; report: {result.report}")
    return 0


def cmd_calibrate(args) -> int:
    from ._io import atomic_write_text
    from ._pipeline import analysis

    output = check_writable(args.output)
    ds = read_dataset(args.run_file, kind=("particles", "fields"))
    calibrate = analysis("calibrate")
    if ds.attrs["crossflock_kind"] == "particles":
        if "x" not in ds:
            raise InputError(f"run file {args.run_file!r} has no particle snapshots; re-run "
                             "it with agents.snapshots = true to calibrate on it")
        ds = analysis("coarse_grain")(ds)
    result = calibrate(ds)
    atomic_write_text(output, result.to_toml())
    summary = getattr(result, "summary", None)
    if callable(summary):
        _out(summary())
    _out(f"wrote {output}")
    return 0


def cmd_sweep(args) -> int:
    from ._sweep import load_sweep
    from ._sweep_run import run_sweep

    sweep = load_sweep(args.sweep_file)
    if args.workers is not None and args.workers < 1:
        raise InputError(f"--workers must be a positive integer (got {args.workers})")
    outdir = ensure_dir(args.output)
    summary = run_sweep(sweep, outdir, workers=args.workers, scheduler=args.scheduler,
                        progress=args.progress)
    _out(summary.line())
    _out(f"wrote {summary.output}")
    return 1 if summary.failed else 0


def cmd_check(args) -> int:
    from ._check import (
        check_reference_usable,
        format_table,
        gate,
        reference_dataset,
        run_ensemble,
    )
    from ._io import dataset_config

    cfg = _load(args)
    ref_path = Path(args.reference)
    engines = cfg.check.engines
    n = cfg.check.ensemble

    if args.update:
        check_writable(ref_path)
        values, seeds = run_ensemble(cfg, 0, n, engines, progress=args.progress, log=status)
        write_dataset(reference_dataset(cfg, values, seeds, engines), ref_path)
        _out(f"wrote reference {ref_path} ({n} seeds, engines {', '.join(engines)})")
        return 0
    if not ref_path.exists():
        raise InputError(f"reference {str(ref_path)!r} does not exist; create it with --update")
    ref = read_dataset(ref_path, kind="reference")
    ref_cfg = dataset_config(ref)
    problems = check_reference_usable(ref, cfg, ref_cfg, args.allow_config_change, ref_path)
    for p in problems:
        status(f"note: {p} (compared anyway)")
    ref_engines = tuple(str(ref.attrs.get("engines", "")).split(","))
    if set(engines) - set(ref_engines):
        raise InputError(f"reference {str(ref_path)!r} holds engines {', '.join(ref_engines)}; "
                         f"`check.engines` asks for {', '.join(engines)}")
    reference = {k: ref[k].values for k in ref.data_vars}
    first = int(ref.sizes["member"])
    current, _ = run_ensemble(cfg, first, n, engines, progress=args.progress, log=status)
    rows = gate(reference, current, cfg.check.false_alarm)
    _out(format_table(rows))
    failed = [r.name for r in rows if not r.passed]
    if failed:
        _out(f"check: REGRESSION in {', '.join(failed)}")
        return 1
    _out(f"check: pass ({len(rows)} observables, family-wise false-alarm rate "
         f"{cfg.check.false_alarm:g})")
    return 0

