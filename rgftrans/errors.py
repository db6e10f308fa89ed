"""Exception and warning classes of rgftrans.

Every error the package raises for bad input is a subclass of
:class:`RgftransError` and carries a one-line message that names what is
wrong, quotes the offending value and says how to fix it.  The command line
prints that line and exits with status 2; nothing else is shown.

A computation that ran on valid input but did not produce a result worth
trusting (a fit that did not converge, a search that found nothing valid, a
sweep whose workers died) raises a :class:`ComputationFailed` subclass: the
command line prints one line saying what failed and what to try, writes
nothing as if it were a result, and exits with status 1.
"""


class RgftransError(ValueError):
    """Base class of all input errors raised by rgftrans."""


class GeometryError(RgftransError):
    """A region or shape is malformed (empty, self-intersecting, disconnected)."""


class LatticeError(RgftransError):
    """A lattice is malformed (non-positive spacing, degenerate vectors)."""


class LeadError(RgftransError):
    """A lead does not fit the device (misses it, overlaps it, too wide)."""


class PotentialError(RgftransError):
    """An onsite potential is malformed (NaN, infinite, wrong shape)."""


class MaterialError(RgftransError):
    """An unknown material or a non-physical material parameter."""


class EnergyError(RgftransError):
    """Energies that cannot be used (NaN, empty array)."""


class ComputationFailed(RuntimeError):
    """Base class of computations that ran but failed (command-line exit status 1); one-line message."""


class FitFailed(ComputationFailed):
    """A least-squares fit did not converge, hit a bound, or fits the data badly; nothing is reported as a fit."""


class SearchFailed(ComputationFailed):
    """A search (e.g. for dark states) produced no valid result; nothing is reported as found."""


class RgftransWarning(UserWarning):
    """Base class of warnings about legal but suspicious input."""


class ThresholdWarning(RgftransWarning):
    """An energy sits on a lead channel threshold; a small imaginary part was added."""


class ResolutionWarning(RgftransWarning):
    """A discretisation or energy grid too coarse for the physics it should resolve."""


class ValidityWarning(RgftransWarning):
    """The model is legal but the result may not describe the device (e.g. a closed dot where charging
    dominates, or a potential step at a lead interface that reflects spuriously)."""
