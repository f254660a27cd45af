"""Open-PSA MEF expressions: the number a basic event's probability expression stands for.

:class:`Expressions` evaluates ``float``, ``int``, ``bool``, ``parameter``,
``system-mission-time`` (also ``mission-time``), ``pi``, ``add``, ``sub``,
``mul``, ``div``, ``neg``, ``exponential`` and ``Weibull``; a random deviate
(uniform, normal, lognormal, gamma, beta) or a ``histogram`` is replaced by
its mean and reported. Every value is checked before it is used:

- numbers are written in ASCII as in XML Schema (``0.05``, ``1e-3``, ``-2``);
  ``１``, ``0.0_5`` or ``٠.٥`` (which Python's own ``float`` would take) and
  infinities or NaN are refused;
- each law's domain is checked (a Weibull scale and shape above 0, a beta
  deviate's shapes above 0, an exponential's rate and time not negative...);
- every result must be a finite number, so an overflow or inf - inf is
  reported with its line instead of turning into a wrong probability.

The expression tree and the chains of parameters are walked with an explicit
stack, so a chain of any length is limited only by memory.

References
----------
Open-PSA Model Exchange Format, version 2.0d, The Open-PSA Initiative, 2008,
chapter on stochastic expressions (arithmetic, built-in laws, random deviates).
NUREG-0492, chapter VI (the exponential failure law).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass, field

from troubleshoot.model import exponential_probability

_MISSION_TIME_TAGS = ("system-mission-time", "mission-time")
_IGNORED_QUIETLY = ("label", "attributes")

#: A number as XML Schema writes xs:double / xs:decimal, ASCII digits only.
_NUMBER = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?", re.ASCII)
#: An integer as XML Schema writes xs:integer, ASCII digits only.
_INTEGER = re.compile(r"[+-]?[0-9]+", re.ASCII)

#: Arithmetic: tag -> (fewest arguments, most or None).
_ARITHMETIC = {
    "add": (1, None), "sub": (1, None), "mul": (1, None), "div": (1, None), "neg": (1, 1),
    "exponential": (2, 2), "Weibull": (4, 4),
}
#: Random deviates replaced by their mean: tag -> accepted argument counts.
_DEVIATES = {
    "uniform-deviate": (2,), "normal-deviate": (2,), "lognormal-deviate": (2, 3),
    "gamma-deviate": (2,), "beta-deviate": (2,),
}


def tag_of(element) -> str | None:
    """Local tag name, or None for comments and processing instructions."""
    tag = element.tag
    if not isinstance(tag, str):
        return None
    return tag.rsplit("}", 1)[-1]


def children(element) -> list:
    """Element children, without comments and processing instructions."""
    return [c for c in element if tag_of(c) is not None]


def body(element) -> list:
    """Children of a definition without its label and attributes."""
    return [c for c in children(element) if tag_of(c) not in _IGNORED_QUIETLY]


def strict_number(text: str | None) -> float | None:
    """The finite number ``text`` writes in ASCII (surrounding blanks allowed), else None."""
    if text is None or not _NUMBER.fullmatch(text.strip()):
        return None
    value = float(text)
    return value if math.isfinite(value) else None


def strict_integer(text: str | None) -> int | None:
    """The integer ``text`` writes in ASCII digits (surrounding blanks allowed), else None."""
    if text is None or not _INTEGER.fullmatch(text.strip()):
        return None
    return int(text)


class DomainError(Exception):
    """An argument outside its law's domain; the message says which and why."""


def weibull(alpha: float, beta: float, t0: float, time: float) -> float:
    """Weibull failure probability 1 - exp(-((t - t0)/alpha)^beta); MEF order alpha, beta, t0, t.

    Computed through logarithms, so a huge ((t - t0)/alpha)^beta gives 1 rather
    than an overflow.
    """
    if not alpha > 0:
        raise DomainError(f"its scale alpha is {alpha:g}; it must be above 0")
    if not beta > 0:
        raise DomainError(f"its shape beta is {beta:g}; it must be above 0")
    if time <= t0:
        return 0.0
    log_power = beta * (math.log(time - t0) - math.log(alpha))
    if log_power > 709.0:  # exp would overflow: the failure is certain to double precision
        return 1.0
    return -math.expm1(-math.exp(log_power))


def exponential(rate: float, time: float) -> float:
    """Exponential failure probability 1 - exp(-rate t) (NUREG-0492, chapter VI)."""
    if rate < 0 or time < 0:
        raise DomainError(f"rate {rate:g} and time {time:g} must not be negative")
    return exponential_probability(rate, time)


def deviate_mean(tag: str, v: list[float]) -> float:
    """Mean of a random deviate, its parameters checked (MEF 2.0d, random deviates)."""
    if tag == "uniform-deviate":
        if v[0] > v[1]:
            raise DomainError(f"its lower bound {v[0]:g} is above its upper bound {v[1]:g}")
        return v[0] / 2 + v[1] / 2
    if tag == "normal-deviate":
        if v[1] < 0:
            raise DomainError(f"its standard deviation {v[1]:g} is negative")
        return v[0]
    if tag == "lognormal-deviate":
        if len(v) == 3:  # mean, error factor, confidence level
            if not v[1] >= 1:
                raise DomainError(f"its error factor {v[1]:g} is below 1")
            if not 0 < v[2] < 1:
                raise DomainError(f"its confidence level {v[2]:g} is not between 0 and 1")
            return v[0]
        mu, sigma = v  # parameters of the underlying normal
        if sigma < 0:
            raise DomainError(f"its sigma {sigma:g} is negative")
        exponent = mu + sigma * sigma / 2
        if exponent > 709.0:
            raise DomainError(f"its mean exp(mu + sigma^2/2) = exp({exponent:g}) overflows")
        return math.exp(exponent)
    if tag == "gamma-deviate":
        if not (v[0] > 0 and v[1] > 0):
            raise DomainError(f"its shape {v[0]:g} and scale {v[1]:g} must be above 0")
        return v[0] * v[1]
    if tag == "beta-deviate":
        if not (v[0] > 0 and v[1] > 0):
            raise DomainError(f"its shapes alpha {v[0]:g} and beta {v[1]:g} must be above 0")
        return v[0] / (v[0] + v[1])
    raise ValueError(tag)  # pragma: no cover - _DEVIATES lists the tags


@dataclass
class Expressions:
    """Evaluates MEF expressions of one file, parameters memoised, problems reported.

    Parameters
    ----------
    parameters : dict
        Parameter name -> its ``define-parameter`` element.
    mission_time : callable
        Returns the mission time in hours (and records that it was used).
    error, note : callable
        ``(line, message)`` reporters of errors and warnings.
    """

    parameters: dict
    mission_time: Callable[[], float | None]
    error: Callable[[int | None, str], None]
    note: Callable[[int | None, str], None]
    _parameter_values: dict = field(default_factory=dict)

    def evaluate(self, element) -> float | None:
        """Number of an MEF expression, or None after reporting an error.

        A post-order walk with an explicit stack: an element is computed once
        every element it needs (its arguments, or a parameter's definition)
        has a value. A parameter's value is kept, so each is computed once.
        """
        values: dict = {}
        in_progress: dict[str, None] = {}  # parameters on the path, in order
        stack: list[tuple[object, bool]] = [(element, False)]
        while stack:
            node, expanded = stack.pop()
            if node in values:
                continue
            if not expanded:
                needs = self._needs(node, in_progress, values)
                if needs is None:
                    continue  # answered (or refused) without arguments
                stack.append((node, True))
                stack.extend((child, False) for child in reversed(needs) if child not in values)
                continue
            values[node] = self._compute(node, values, in_progress)
        return values[element]

    # -- the walk ----------------------------------------------------------
    def _needs(self, node, in_progress: dict[str, None], values: dict) -> list | None:
        """The elements ``node`` needs first; None after storing its value in ``values``."""
        tag = tag_of(node)
        line = node.sourceline
        if tag == "parameter":
            name = node.get("name")
            if name in self._parameter_values:
                values[node] = self._parameter_values[name]
                return None
            definition = self.parameters.get(name)
            if definition is None:
                self.error(line, f"parameter '{name}' is not defined; add a define-parameter")
                values[node] = None
                return None
            if name in in_progress:
                path = list(in_progress)
                cycle = " -> ".join(path[path.index(name):] + [name])
                self.error(line, f"parameters refer to each other in a cycle ({cycle}); break the cycle")
                values[node] = None
                return None
            parts = body(definition)
            if len(parts) != 1:
                self.error(definition.sourceline, f"parameter '{name}' needs exactly one expression")
                self._parameter_values[name] = values[node] = None
                return None
            in_progress[name] = None
            return parts
        args = children(node)
        if tag in _ARITHMETIC:
            low, high = _ARITHMETIC[tag]
            if len(args) < low or (high is not None and len(args) > high):
                wanted = f"{low}" if low == high else f"at least {low}"
                self.error(line, f"<{tag}> takes {wanted} argument(s), found {len(args)}")
                values[node] = None
                return None
            return args
        if tag in _DEVIATES:
            counts = _DEVIATES[tag]
            if len(args) not in counts:
                wanted = " or ".join(str(c) for c in counts)
                self.error(line, f"<{tag}> takes {wanted} arguments, found {len(args)}")
                values[node] = None
                return None
            return args
        if tag == "histogram":
            if not args or tag_of(args[0]) == "bin":
                self.error(line, "<histogram> needs its lower boundary before the bins")
                values[node] = None
                return None
            needed = [args[0]]
            for part in args[1:]:
                bounds = children(part)
                if tag_of(part) != "bin" or len(bounds) != 2:
                    self.error(part.sourceline, "a histogram <bin> holds an upper boundary and a weight")
                    values[node] = None
                    return None
                needed += bounds
            return needed
        values[node] = self._leaf(node)
        return None

    def _leaf(self, node) -> float | None:
        tag = tag_of(node)
        line = node.sourceline
        if tag in ("float", "int"):
            text = node.get("value")
            value = strict_integer(text) if tag == "int" else strict_number(text)
            if value is None:
                what = "a whole number in ASCII digits" if tag == "int" else (
                    "a finite number in ASCII digits (such as 0.05 or 1e-3)")
                self.error(line, f"<{tag}> value {text!r} is not {what}; correct the value")
                return None
            return float(value)
        if tag == "bool":
            text = (node.get("value") or "").strip().lower()
            if text not in ("true", "false"):
                self.error(line, f"<bool> value {text!r} is neither true nor false")
                return None
            return 1.0 if text == "true" else 0.0
        if tag in _MISSION_TIME_TAGS:
            return self.mission_time()
        if tag == "pi":
            return math.pi
        self.error(line, f"expression <{tag}> is not supported and has no mean to fall back on; "
                   "replace it by a <float value=...> probability")
        return None

    def _compute(self, node, values: dict, in_progress: dict[str, None]) -> float | None:
        """The value of ``node`` from the values of what it needs (all present now)."""
        tag = tag_of(node) or ""
        line = node.sourceline
        if tag == "parameter":
            name = node.get("name")
            value = values[body(self.parameters[name])[0]]
            in_progress.pop(name, None)
            self._parameter_values[name] = value
            return value
        if tag == "histogram":
            return self._histogram(node, values)
        args = [values[a] for a in children(node)]
        if any(v is None for v in args):
            return None
        try:
            if tag in _DEVIATES:
                mean = deviate_mean(tag, args)
            else:
                mean = None
                assert tag is not None, "only elements that take arguments (see _needs) are computed"
                result = self._arithmetic(tag, args)
        except DomainError as exc:
            self.error(line, f"<{tag}> is outside its domain: {exc}; correct its arguments")
            return None
        except (OverflowError, ZeroDivisionError, ValueError):
            self.error(line, f"<{tag}> cannot be computed from its arguments ({_listed(args)}); "
                       "correct them")
            return None
        if mean is not None:
            result = mean
        if not math.isfinite(result):
            self.error(line, f"<{tag}> of {_listed(args)} is not a finite number (it overflows); "
                       "correct its arguments")
            return None
        if mean is not None:
            self.note(line, f"<{tag}> is a random deviate: its mean {mean:.6g} is used as a point "
                      "value and the uncertainty is dropped")
        return result

    @staticmethod
    def _arithmetic(tag: str, v: list[float]) -> float:
        if tag == "add":
            return math.fsum(v)
        if tag == "mul":
            return math.prod(v)
        if tag == "sub":
            return v[0] - math.fsum(v[1:])
        if tag == "neg":
            return -v[0]
        if tag == "div":
            result = v[0]
            for divisor in v[1:]:
                if divisor == 0:
                    raise DomainError("it divides by zero")
                result /= divisor
            return result
        if tag == "exponential":
            return exponential(v[0], v[1])
        if tag == "Weibull":
            return weibull(*v)
        raise ValueError(tag)  # pragma: no cover - _ARITHMETIC lists the tags

    def _histogram(self, node, values: dict) -> float | None:
        line = node.sourceline
        args = children(node)
        lower = values[args[0]]
        total_weight = weighted = 0.0
        for part in args[1:]:
            upper_element, weight_element = children(part)
            upper, weight = values[upper_element], values[weight_element]
            if lower is None or upper is None or weight is None:
                return None
            if upper < lower or weight < 0:
                self.error(part.sourceline, "a histogram <bin> needs an upper boundary not below the "
                           "one before it and a weight that is not negative")
                return None
            weighted += weight * (lower / 2 + upper / 2)
            total_weight += weight
            lower = upper
        if not total_weight > 0 or not math.isfinite(weighted / total_weight):
            self.error(line, "<histogram> weights sum to zero (or overflow); give positive weights")
            return None
        mean = weighted / total_weight
        self.note(line, f"<histogram> is a distribution: its mean {mean:.6g} is used as a point "
                  "value and the uncertainty is dropped")
        return mean

    # -- a basic event's law -----------------------------------------------
    def probability_law(self, element) -> tuple[float, float | None, float | None] | None:
        """(probability, rate, exposure) of a basic event's expression element.

        rate (per hour) and exposure (hours; the mission time for
        ``<system-mission-time/>``) are given when the expression is an
        exponential law, directly or through parameters.
        """
        shape = element
        seen: set[str] = set()
        while tag_of(shape) == "parameter" and shape.get("name") in self.parameters:
            name = shape.get("name")
            if name in seen:
                break  # a cycle: evaluate() reports it
            seen.add(name)
            parts = body(self.parameters[name])
            if len(parts) != 1:
                break
            shape = parts[0]
        if tag_of(shape) == "exponential" and len(children(shape)) == 2:
            rate_element, time_element = children(shape)
            rate = self.evaluate(rate_element)
            time = self.evaluate(time_element)
            if rate is None or time is None:
                return None
            if rate < 0 or time < 0:
                self.error(shape.sourceline, "an exponential law needs a rate and a time that are not negative")
                return None
            if time == 0:
                return 0.0, None, None  # no exposure, no failure: a plain probability
            return exponential_probability(rate, time), rate, time
        probability = self.evaluate(element)
        return None if probability is None else (probability, None, None)


def _listed(values: list[float]) -> str:
    return ", ".join(f"{v:g}" for v in values)
