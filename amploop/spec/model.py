"""The job as frozen dataclasses: the amplifier, its bias, the feedback network, the
compensation knobs, the analysis, the corners, the targets. Units are SI throughout
(farads, ohms, hertz, volts, kelvin-free degrees Celsius for temperatures)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from amploop.spec.limits import Analysis, OperatingPointLimits, Target, Transient

__all__ = [
    "Amplifier",
    "Bias",
    "BiasSource",
    "Corner",
    "Feedback",
    "FeedbackKind",
    "Job",
    "Knob",
    "MonteCarlo",
    "Sample",
]


FeedbackKind = Literal["resistive", "capacitive", "unity"]


@dataclass(frozen=True)
class Amplifier:
    """``[amplifier]``: where the subckt is and which ports are the inputs and output.

    Attributes
    ----------
    netlist
        The file holding the ``.subckt`` (absolute path).
    subckt
        The subckt's name.
    in_p, in_n, out
        Its non-inverting input, inverting input and output ports.
    models
        A model file, plain or of ``.lib`` sections (each corner's ``lib`` picks one);
        None when not given.
    includes
        More files to include in the deck (absolute paths).
    input_device, second_stage_device
        An input-pair transistor and the second-stage driver, for the textbook strategy
        (their gm come from the operating point); None when not given.
    out_n
        The second output of a fully-differential amplifier (the one that falls with
        ``in_p``); None for a single-ended amplifier.
    common_mode_break
        A 0 V voltage source inside the subckt on the common-mode feedback path, first
        node on the driving side; amploop replaces it by its probe. None: the common-mode
        loop is not measured.
    common_mode_reference
        The port of a fully-differential amplifier that sets its output common mode (the
        CMFB's reference, biased by a voltage source in ``[bias]``): both outputs are
        checked against its voltage at the operating point. None: against the input common
        mode.
    """

    netlist: Path
    subckt: str
    in_p: str
    in_n: str
    out: str
    models: Path | None = None
    includes: tuple[Path, ...] = ()
    input_device: str | None = None
    second_stage_device: str | None = None
    out_n: str | None = None
    common_mode_break: str | None = None
    common_mode_reference: str | None = None

    @property
    def fully_differential(self) -> bool:
        """Whether the amplifier has two outputs (``out_n`` given)."""
        return self.out_n is not None


@dataclass(frozen=True)
class BiasSource:
    """One ``[bias]`` port: a voltage source to ground, or a current drawn out of the port.

    Attributes
    ----------
    port
        The subckt port.
    kind
        ``"volts"`` (a voltage source to ground) or ``"amps"`` (a current drawn out of the
        port to ground; negative: into it).
    value
        The voltage (volts) or current (amperes), a SPICE expression.
    """

    port: str
    kind: Literal["volts", "amps"]
    value: str  # SPICE expression


@dataclass(frozen=True)
class Bias:
    """``[bias]``: input common mode (SPICE expression, volts) and the other ports' sources.

    Attributes
    ----------
    common_mode
        The input common-mode voltage, volts (a SPICE expression).
    sources
        One source per other biased port, in the order of the job file.
    """

    common_mode: str
    sources: tuple[BiasSource, ...]


@dataclass(frozen=True)
class Feedback:
    """``[feedback]``, or one ``[[feedback]]`` configuration: the network around the
    amplifier (values are SPICE expressions).

    ``input`` (Z1) runs from the AC-grounded signal source to the inverting input,
    ``feedback`` (Z2) from the output to the inverting input; ``load`` is a capacitor from
    the output to ground; ``dc_path`` (capacitive loops only) a resistor across Z2;
    ``input_load`` a capacitor from the inverting input to ground. A ``"unity"``
    configuration ties the output to the inverting input (no Z1, no Z2): a follower, with
    its input and output capacitances given by ``input_load`` and ``load``.

    Attributes
    ----------
    kind
        ``"resistive"`` (Z1 and Z2 are resistors, ohms), ``"capacitive"`` (capacitors,
        farads) or ``"unity"`` (the output tied to the inverting input).
    input
        Z1, ohms or farads.
    feedback
        Z2, ohms or farads.
    load
        The load capacitance, farads (``"0"`` when not given).
    dc_path
        The resistor across Z2 of a capacitive loop, ohms (default ``"1G"``).
    input_load
        A capacitor from the inverting input to ground, farads (``"0"``: none).
    name
        The configuration's name in a ``[[feedback]]`` array; None for a single
        ``[feedback]`` table.
    """

    kind: FeedbackKind
    input: str
    feedback: str
    load: str
    dc_path: str = "1G"
    input_load: str = "0"
    name: str | None = None

    @property
    def place(self) -> str:
        """Where it is in the job file, for messages: ``[feedback]`` or
        ``[[feedback]] "name"``."""
        return "[feedback]" if self.name is None else f'[[feedback]] "{self.name}"'


@dataclass(frozen=True)
class UserTestbench:
    """``[testbench]``: the designer's own closed-loop deck, with the loop's break marked.

    Attributes
    ----------
    netlist
        The deck (absolute path); it instantiates the amplifier's subckt itself.
    breaks
        The 0 V voltage source in it where the loop is broken, first node on the
        amplifier's side; two for a fully-differential amplifier (one per output, ``out``'s
        first).
    beta
        The feedback factor for the textbook strategy's start; None when not given.
    load_f
        The capacitance the output drives, farads, for the same; None when not given.
    """

    netlist: Path
    breaks: tuple[str, ...]
    beta: float | None = None
    load_f: float | None = None


@dataclass(frozen=True)
class Knob:
    """One ``[compensation]`` entry: a role (``cc`` or ``rc``) and where the netlist keeps it.

    Attributes
    ----------
    role
        ``"cc"`` (farads) or ``"rc"`` (ohms; or metres / a count for a device size).
    where
        ``"param"`` (global ``.param`` or subckt parameter), ``"element"`` (an R or C whose
        value is rewritten) or ``"device"`` (a MOSFET whose ``size`` is tuned).
    name
        The parameter, element or device name.
    twins
        For ``where == "element"`` in a fully-differential amplifier: the matched
        elements always set to the same value as ``name`` (the other half's Cc or Rc).
    size
        For ``where == "device"``: ``"w"``, ``"l"`` or ``"m"``.
    minimum, maximum
        Tuning bounds in SI units; None when not given.
    """

    role: str
    where: Literal["param", "element", "device"]
    name: str
    size: str | None = None
    minimum: float | None = None
    maximum: float | None = None
    twins: tuple[str, ...] = ()


@dataclass(frozen=True)
class Sample:
    """What makes a corner one Monte Carlo sample of a base corner.

    Attributes
    ----------
    base
        The name of the corner it is sampled around.
    index
        Its number among the base corner's samples, from 0 (its name ends in ``#index``).
    seed
        ngspice's random seed for its deck (``.option seed``), so that ``agauss`` and the
        other statistical functions of the model file draw the same values every run.
    params
        The parameters amploop drew for it, lower-case name -> value (SI); they are also in
        the corner's ``params``.
    """

    base: str
    index: int
    seed: int
    params: dict[str, float] = field(default_factory=dict)

    def as_json(self) -> dict:
        """Its ``sample`` entry in results.json."""
        return {"base": self.base, "index": self.index, "seed": self.seed,
                "params": dict(self.params)}


@dataclass(frozen=True)
class MonteCarlo:
    """``[monte_carlo]``: how many samples of which corners, drawn how.

    Attributes
    ----------
    samples
        Samples per base corner (at least 2).
    seed
        The seed of amploop's draws and of the samples' ngspice seeds.
    base
        The names of the corners sampled around; None: every corner.
    lib
        A ``.lib`` section of the models file whose cards vary statistically, read by the
        samples in place of their base corner's section; None: the base's own.
    params
        Parameters amploop draws itself: lower-case name -> (sigma, relative). A sample's
        value is ``nominal + sigma·z`` (SI), or ``nominal·(1 + sigma·z)`` when relative,
        with ``z`` standard normal.
    """

    samples: int
    seed: int = 1
    base: tuple[str, ...] | None = None
    lib: str | None = None
    params: dict[str, tuple[float, bool]] = field(default_factory=dict)


@dataclass(frozen=True)
class Corner:
    """One corner: a model section, a temperature (°C) and SPICE parameter values (SI).

    Attributes
    ----------
    name
        The corner's name (given, or made from its values).
    lib
        The ``.lib`` section of ``[amplifier].models``; None for none.
    temp
        The temperature, degrees Celsius.
    params
        Lower-case parameter name -> value (SI), the ``[params]`` defaults included.
    configuration
        The ``[[feedback]]`` configuration it runs in (its name then ends in
        ``@configuration``); None with a single ``[feedback]`` table.
    sample
        What makes it a Monte Carlo sample (its name then ends in ``#index``, before any
        ``@configuration``); None for a corner that is not one.
    """

    name: str
    lib: str | None = None
    temp: float = 27.0
    params: dict[str, float] = field(default_factory=dict)
    configuration: str | None = None
    sample: Sample | None = None

    def __hash__(self) -> int:
        return hash((self.name, self.lib, self.temp, tuple(sorted(self.params.items())),
                     self.configuration, None if self.sample is None else self.sample.seed))

    @property
    def group(self) -> str | None:
        """The set of samples it belongs to, for statistics: its base corner's name (with
        ``@configuration`` when it has one); None when it is not a sample."""
        if self.sample is None:
            return None
        return self.sample.base + ("" if self.configuration is None else f"@{self.configuration}")


@dataclass(frozen=True)
class Job:
    """A loaded, checked job file. Paths are absolute; values SI.

    Attributes
    ----------
    path
        The job file.
    name
        The job's name (default: the job file's name without its suffix).
    amplifier, bias, feedback
        The ``[amplifier]``, ``[bias]`` and ``[feedback]`` tables (``feedback``: the first
        configuration of a ``[[feedback]]`` array).
    compensation
        Role (``"cc"``, and ``"rc"`` when given) -> where the netlist keeps it.
    analysis
        The ``[analysis]`` table (defaults when it is left out).
    corners
        Every corner, listed ones first, then the ``[corner_grid]`` product; one
        ``nominal`` corner when there are none. With a ``[[feedback]]`` array, every
        corner in every configuration, configuration by configuration.
    target
        The ``[target]`` table; None when left out (enough for measure, not for tune).
    transient
        The ``[transient]`` table (defaults when it is left out).
    operating_point
        The ``[operating_point]`` limits that make a measured corner suspect (defaults
        when it is left out).
    raw
        The TOML data as read.
    configurations
        The ``[[feedback]]`` configurations by name, in the job file's order; empty with a
        single ``[feedback]`` table.
    testbench
        The user's own ``[testbench]``; None when amploop builds its own (``feedback`` is
        then None, ``bias`` empty).
    monte_carlo
        The ``[monte_carlo]`` table; None when left out. Its samples are already in
        ``corners``, in place of their base corners.
    """

    path: Path
    name: str
    amplifier: Amplifier
    bias: Bias
    feedback: Feedback | None
    compensation: dict[str, Knob]
    analysis: Analysis
    corners: tuple[Corner, ...]
    target: Target | None = None
    transient: Transient = field(default_factory=Transient)
    operating_point: OperatingPointLimits = field(default_factory=OperatingPointLimits)
    raw: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)
    configurations: tuple[Feedback, ...] = ()
    testbench: UserTestbench | None = None
    monte_carlo: MonteCarlo | None = None

    @property
    def feedbacks(self) -> tuple[Feedback, ...]:
        """Every feedback configuration: the ``[[feedback]]`` array, or the one table (none
        with the user's own ``[testbench]``)."""
        return self.configurations or ((self.feedback,) if self.feedback else ())

    def feedback_for(self, corner: Corner) -> Feedback | None:
        """The feedback configuration ``corner`` runs in (None with a ``[testbench]``)."""
        for feedback in self.configurations:
            if feedback.name == corner.configuration:
                return feedback
        return self.feedback

    @property
    def folder(self) -> Path:
        return self.path.parent
