"""``--set ROLE=VALUE`` on the command line: compensation values that replace the
netlist's own for one measurement."""

from __future__ import annotations

from amploop.errors import JobError, did_you_mean
from amploop.spec.model import Job
from amploop.spec.resistor_values import check_rc_text
from amploop.spice.units import parse_value

__all__ = ["parse_overrides"]


def parse_overrides(items: list[str] | None, job: Job) -> dict[str, float]:
    """``--set cc=1.5p`` items -> ``{"cc": 1.5e-12}``, checked against ``[compensation]``.

    Parameters
    ----------
    items
        The ``ROLE=VALUE`` items (values take SPICE suffixes); None for none.
    job
        The loaded job whose compensation roles they must name.

    Returns
    -------
    dict
        Role -> value in SI units (farads for ``cc``).

    Raises
    ------
    JobError
        For a malformed item, a role the job does not have, or a bad or negative value.
    """
    values: dict[str, float] = {}
    for item in items or []:
        role, eq, text = item.partition("=")
        role = role.strip().lower()
        if not eq or not role:
            raise JobError(f"--set {item!r}: expected ROLE=VALUE, e.g. cc=1.5p")
        if role not in job.compensation:
            raise JobError(
                f"--set {item!r}: the job has no compensation role {role!r}"
                + did_you_mean(role, list(job.compensation)),
                file=job.path, place="[compensation]",
            )
        try:
            value = parse_value(text)
        except ValueError as exc:
            raise JobError(f"--set {item!r}: {exc}") from None
        if value < 0:
            raise JobError(f"--set {item!r}: must not be negative")
        if role == "rc" and job.compensation[role].where != "device":
            check_rc_text(text, place=f"--set {item!r}")
        if role == "cc" and value == 0:
            raise JobError(f"--set {item!r}: Cc must be above zero")
        values[role] = value
    return values
