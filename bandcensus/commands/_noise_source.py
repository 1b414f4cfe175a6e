"""The noise-source options every command that uses a noise source accepts (one spelling everywhere)."""

from __future__ import annotations

from typing import TYPE_CHECKING

import click

if TYPE_CHECKING:  # the analyses are imported when a command runs, not when its help is shown
    from analysis.workflows import NoiseOptions


def noise_source_options(func):
    """Add ``--enr-db``, ``--enr-table``, ``--cold-k`` and ``--receiver-nf-db`` to a command."""
    func = click.option("--receiver-nf-db", type=float, default=None,
                        help="Assumed receiver noise figure, dB, used only where it is not measured.")(func)
    func = click.option("--cold-k", type=float, default=290.0, show_default=True,
                        help="Physical temperature of the termination and of the noise source when off, K.")(func)
    func = click.option("--enr-table", type=click.Path(dir_okay=False), default=None,
                        help="ENR table CSV with rows freq_mhz,enr_db (interpolated, never extrapolated).")(func)
    func = click.option("--enr-db", type=float, default=None,
                        help="Flat excess noise ratio of the noise source, dB.")(func)
    return func


def noise_options_from(enr_db, enr_table, cold_k, receiver_nf_db) -> NoiseOptions:
    """The parsed options as :class:`analysis.workflows.NoiseOptions` (usage error for both ENR forms)."""
    if enr_db is not None and enr_table is not None:
        raise click.UsageError("give either --enr-db or --enr-table, not both")
    if not cold_k > 0:
        raise click.BadParameter(f"must be positive kelvin, got {cold_k}", param_hint="--cold-k")
    from analysis.noise.arithmetic import load_enr_table
    from analysis.workflows import NoiseOptions

    table = load_enr_table(enr_table) if enr_table else None
    return NoiseOptions(enr_db=enr_db, enr_table=table, cold_k=cold_k, receiver_nf_db=receiver_nf_db)
