"""Resistor values in a job that SPICE reads otherwise than their writer meant.

In SPICE ``M`` is milli, as ``m`` is: ``1M`` is 1 mΩ, and a megaohm is ``1Meg``. A feedback
resistor written ``1M`` for 1 MΩ makes a loop that never crosses 0 dB or a feedback network
that shorts the output, and the measurement then fails far from the cause. So the job's
resistors are checked when the job is read:

- the feedback network's resistors (``[feedback].input`` and ``.feedback`` of a resistive
  loop, ``.dc_path`` of a capacitive one): a value written with a milli suffix, or below
  1 Ω at any corner, is refused (0 stays allowed: a short, written as one);
- Rc's bounds in ``[compensation]`` and a ``--set rc=`` value: a milli suffix is refused
  (Rc may well be 0 or small, but nobody writes ``20m`` for it).

Each refusal says what SPICE reads and what was probably meant (``did you mean 1Meg?``).
"""

from __future__ import annotations

from amploop.errors import JobError
from amploop.spice.expressions import evaluate
from amploop.spice.units import SCALE_SUFFIXES, engineering, parse_value, scale_of, split_number

__all__ = ["check_feedback_resistors", "check_rc_text", "megaohm_reading"]


def megaohm_reading(text: object) -> str | None:
    """The megaohm value ``text`` was probably meant to be (``"1M"`` -> ``"1Meg"``) when it
    is a SPICE number with the milli suffix ``m``/``M``; None otherwise."""
    parts = split_number(text) if isinstance(text, str) else None
    if parts is None:
        return None
    mantissa, letters = parts
    scale, unit = scale_of(letters)
    if scale != SCALE_SUFFIXES["m"] or unit not in ("", "ohm", "ohms"):
        return None
    return f"{mantissa}Meg{letters[1:]}"  # the unit as written: 4.7mOhm -> 4.7MegOhm


def _milli_problem(text: str) -> str | None:
    meant = megaohm_reading(text)
    if meant is None:
        return None
    return (f"{text.strip()!r} is {engineering(parse_value(text), 'Ω')} in SPICE (M and m both "
            f"mean milli); did you mean {meant!r}?")


def check_rc_text(text: object, *, file=None, place: str) -> None:
    """Refuse an Rc value ``text`` written with the milli suffix.

    Parameters
    ----------
    text
        The value as written (a TOML string or number, or the text after ``--set rc=``).
    file, place
        Where it was written, for the message.

    Raises
    ------
    JobError
        When ``text`` reads like a megaohm written with SPICE's milli suffix.
    """
    problem = isinstance(text, str) and _milli_problem(text)
    if problem:
        raise JobError(problem, file=file, place=place)


def check_feedback_resistors(job) -> None:
    """Refuse feedback-network resistors of ``job`` that are written with the milli suffix
    or come out below 1 Ω (but not 0) at a corner.

    Parameters
    ----------
    job
        A loaded :class:`~amploop.spec.job.Job` (its corners expanded).

    Raises
    ------
    JobError
        Naming the job file, the key and, for a value set through corner parameters, the
        corner.
    """
    for feedback in job.feedbacks:
        _check_resistors(job, feedback)


def _check_resistors(job, feedback) -> None:
    """:func:`check_feedback_resistors` for one configuration ``feedback`` of ``job``."""
    keys = {"resistive": ("input", "feedback"), "capacitive": ("dc_path",)}.get(feedback.kind, ())
    corners = [c for c in job.corners if job.feedback_for(c) is feedback]
    for key in keys:
        text = getattr(feedback, key)
        place = f"{feedback.place}.{key}"
        problem = _milli_problem(text)
        if problem:
            raise JobError(problem, file=job.path, place=place)
        varies = "{" in text or "'" in text  # an expression: may differ per corner
        for corner in corners if varies else corners[:1]:
            try:
                value = evaluate(text, {k: repr(v) for k, v in corner.params.items()})
            except ValueError:
                break  # left to the simulator, as the other checks do
            if 0 < value < 1:
                at = f" at corner {corner.name!r}" if varies else ""
                raise JobError(
                    f"is {engineering(value, 'Ω')}{at}: a feedback resistor below 1 Ω "
                    "shorts the network (write 0 for a short)", file=job.path, place=place,
                    hint="a megaohm is 'Meg' in SPICE: 1M and 1m are 1 milliohm")
