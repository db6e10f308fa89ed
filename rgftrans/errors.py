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


class EigenSolveFailed(ComputationFailed):
    """An iterative eigenvalue solve (shift-invert ARPACK) did not converge or broke down; nothing is returned."""


class RgftransWarning(UserWarning):
    """Base class of warnings about legal but suspicious input."""


class ThresholdWarning(RgftransWarning):
    """An energy sits on a lead channel threshold; a small imaginary part was added."""


class ResolutionWarning(RgftransWarning):
    """A discretisation or energy grid too coarse for the physics it should resolve."""


class PrecisionWarning(RgftransWarning):
    """A requested precision finer than the computation can deliver; the achievable precision is used instead."""


class ValidityWarning(RgftransWarning):
    """The model is legal but the result may not describe the device (e.g. a closed dot where charging
    dominates, or a potential step at a lead interface that reflects spuriously)."""


def _one_line(text: str) -> str:
    """``text`` with its line breaks made spaces: every message of the package is one line."""
    return text.replace("\r\n", " ").replace("\n", " ").replace("\r", " ")


# --- errors of particular parts (each module imports its own from here) --------------------------

class ResourceError(RgftransError):
    """A device or sweep needs more memory or disk than the machine has."""


class ConfigError(RgftransError):
    """A run configuration that cannot be used; the message is one line.

    Attributes
    ----------
    problems : tuple of str
        Every problem found (the message shows the first and counts the rest).
    """

    def __init__(self, message: str, *, problems: tuple[str, ...] = ()) -> None:
        message = _one_line(message)
        super().__init__(message)
        self.problems = tuple(_one_line(p) for p in problems) or (message,)


class StoreError(RgftransError):
    """A result file is missing, foreign, of another schema version, damaged or misused."""


class ExportError(RgftransError):
    """A selection names a dimension or value the result file does not have."""


class CompareError(RgftransError):
    """A measured trace, a stored sweep or a fit request that cannot be compared."""


class SweepFailed(ComputationFailed):
    """The computation broke down (a worker died); finished points are kept and a rerun resumes."""


class TraceFitFailed(FitFailed):
    """A trace fit that ran but is not worth reporting (one-line message; command-line exit status 1).

    Attributes
    ----------
    problems : tuple of FitProblem
        Every reason, in the order of the message.
    attempt : TraceFit
        The failed attempt (``success`` False), for a figure clearly titled
        as failed; :meth:`TraceFit.to_hdf5` refuses to store it.
    """

    def __init__(self, message: str, problems=(), attempt=None):
        super().__init__(message)
        self.problems = tuple(problems)
        self.attempt = attempt

    @property
    def kinds(self) -> tuple:
        """The kinds of the problems, e.g. ("at_bound",)."""
        return tuple(p.kind for p in self.problems)


class FitWarning(RgftransWarning):
    """A fit that ended but whose uncertainties are doubtful (singular covariance: a parameter not determined)."""
