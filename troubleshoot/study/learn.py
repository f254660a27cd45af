"""Learning a model's figures from the fleet's session logs, by exact EM with the engine as the E-step.

Every session log says what a technician saw on one failed unit: the
symptoms, each check's outcome, the repairs and their verifications, the
last "the unit works" included. For a fixed structure (the fault tree and
which causes each check responds to) the figures are learned by
expectation-maximisation (Dempster, Laird & Rubin 1977), the usual way to
fit a Bayesian network's parameters from incomplete data (Lauritzen 1995):

E-step
    For each session the engine propagates all its findings, repairs and
    verifications, exactly. The posterior marginal of every root event is its
    expected "failed" count. For every check made, the joint posterior of its
    causes' states (one clique holds them) gives the expected count of each
    outcome each cause produced and of the false alarms (the hidden
    per-cause variables of the noisy-OR / noisy-MAX decomposition: Heckerman
    & Breese 1996; Díez 1993).
M-step
    Each probability becomes its Beta / Dirichlet posterior mean, the model's
    own figure being the prior, worth ``prior_weight`` sessions.

Sessions are a sample of failed units: they speak of P(faults | complaint).
With the exposure (unit-periods of service the sessions come from), the
units that did not fail are evidence too ("top event did not occur", one
propagation for all of them). Without it, the number of unseen working
units is whatever keeps P(top event) at the model's value: each M-step
solves for it (a Lagrange multiplier of that constraint), so the learned
model changes what fails given a complaint, not how often units fail.

Identical sessions are one E-step row with a count. Rows are cut into pieces
whose boundaries depend only on the sessions, run through
:mod:`troubleshoot.study.execution`, and summed in the pieces' order, so the
result is the same to the last bit in one process, in several, or on Dask.

References
----------
A. P. Dempster, N. M. Laird and D. B. Rubin, "Maximum likelihood from
incomplete data via the EM algorithm", JRSS B 39(1), 1977.
S. L. Lauritzen, "The EM algorithm for graphical association models with
missing data", Computational Statistics & Data Analysis 19, 1995.
D. Heckerman and J. Breese, "Causal independence for probability assessment
and inference using Bayesian networks", IEEE SMC 26(6), 1996.
F. J. Díez, "Parameter adjustment in Bayes networks. The generalized
noisy OR-gate", UAI 1993.
"""

from __future__ import annotations

import hashlib
import math
import threading
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from troubleshoot.advice.repair import top_verification, verification_for
from troubleshoot.engine.inference import Engine, Finding
from troubleshoot.engine.jointree import Evidence
from troubleshoot.errors import (
    ImpossibleFindings,
    LogError,
    SessionError,
    TroubleshootError,
)
from troubleshoot.model import Model
from troubleshoot.model.types import exponential_probability, unlisted_id

#: Default worth of the model's own figures, in sessions (see the README).
DEFAULT_PRIOR_WEIGHT = 20.0
#: EM stops when no probability moves by more than this in an iteration ...
TOLERANCE = 1e-7
#: ... or after this many iterations.
MAX_ITERATIONS = 500
#: E-step rows per piece of work (fixed: the pieces never depend on the workers).
ROWS_PER_PIECE = 64
#: Log files per piece of reading.
LOGS_PER_PIECE = 250
#: A session "informs" a root event when it moves its probability by at least this much.
INFORMS = 0.01
#: Central interval reported for every learned figure.
INTERVAL = 0.90

# What can be wrong with a log (the report names each log under one of these).
TORN, OTHER_MODEL, OTHER_VERSION, EDITED, DAMAGED, INCONSISTENT, IMPOSSIBLE = (
    "torn", "other-model", "other-version", "edited", "damaged", "inconsistent", "impossible")


class LearnError(TroubleshootError):
    """Learning was asked for with inputs it cannot use (no logs, a bad exposure...)."""


# ---------------------------------------------------------------- reading logs


@dataclass(frozen=True)
class SessionData:
    """What one session log says about its unit, as the E-step needs it.

    Attributes
    ----------
    findings : tuple of Finding
        The complaint first, then every finding and verification still standing (undo, retract and
        correct applied), each with its epoch.
    repairs : tuple of str
        Root events repaired, in order.
    confirmed : str or None
        The last repair, when the unit was then verified working.
    escalated : bool
        The session ended handed over: an ``escalate`` action stands (not undone).
    time : str
        The session's start (header time, ISO 8601), or "".
    """

    findings: tuple[Finding, ...]
    repairs: tuple[str, ...]
    confirmed: str | None = None
    escalated: bool = False
    time: str = ""


@dataclass(frozen=True)
class LogProblem:
    """A log left out of learning (or used only in part), and why."""

    path: str
    kind: str
    message: str


def fold_actions(model: Model, actions) -> SessionData:
    """The findings and repairs a session's logged actions leave standing.

    Follows :class:`troubleshoot.session.Session`'s rules without computing
    a posterior: a finding on the check that verifies the last repair is
    that verification; after it reads normal, the unit itself is verified;
    after it reads abnormal, a verification is of the unit (it may work);
    ``undo`` takes back the last action that changed the record (not an
    acknowledgement or a resume).

    Parameters
    ----------
    model : Model
    actions : iterable
        Typed actions (:mod:`troubleshoot.session.actions`) or their log records.

    Raises
    ------
    SessionError
        An action the session would have refused (the log was edited or is inconsistent).
    """
    from troubleshoot.session.actions import (EVENTS, CorrectFinding, Escalate, RecordFinding, RecordRepair,
                                              RecordVerification, RetractFinding, Undo, as_action)
    from troubleshoot.session.session import outcome_index

    top = model.top
    obs: list[tuple[Finding, str]] = [(Finding(top, 1, 0), "complaint")]
    repairs: list[str] = []
    history: list[tuple[tuple, tuple]] = []
    escalated_at: int | None = None  # len(history) just after the escalation that stands

    def request():
        if not repairs:
            return None
        done = [(f, k) for f, k in obs if k == "verification" and f.epoch == len(repairs)]
        if not done:
            return verification_for(model, repairs[-1])
        if any(f.target == top for f, _ in done) or done[-1][0].outcome != 0:
            return None
        return top_verification(model)

    def unit_in_doubt():
        """The repair's own check read abnormal and the unit was not tried since: it may be, any time."""
        return bool(repairs) and not any(f.target == top and f.epoch == len(repairs) for f, _ in obs)

    def find(target, epoch):
        hits = [i for i, (f, k) in enumerate(obs) if k != "complaint" and f.target == target
                and (epoch is None or f.epoch == epoch)]
        if not hits:
            raise SessionError(f"there is no finding on {target!r} to change")
        return hits[-1]

    for raw in actions:
        action = as_action(raw)
        if isinstance(action, Undo):
            if not history:
                raise SessionError("undo with nothing to undo")
            o, r = history.pop()
            obs, repairs = list(o), list(r)
            if escalated_at is not None and len(history) < escalated_at:
                escalated_at = None  # the undo took the escalation back
            continue
        if isinstance(action, EVENTS):
            continue  # logged, never undone, no finding
        history.append((tuple(obs), tuple(repairs)))
        epoch = len(repairs)
        req = request()
        if isinstance(action, RecordVerification) or (isinstance(action, RecordFinding) and req is not None
                                                      and req.target == action.check):
            if req is None and isinstance(action, RecordVerification) and unit_in_doubt():
                req = top_verification(model)
            if req is None:
                raise SessionError("a verification with no repair awaiting it")
            index = outcome_index(req.outcomes, action.outcome, "the verification")
            obs.append((Finding(req.target, index, epoch), "verification"))
        elif isinstance(action, RecordFinding):
            check = model.check_by_id.get(action.check)
            if check is None:
                raise SessionError(f"unknown check {action.check!r}")
            if any(f.target == action.check and f.epoch == epoch for f, _ in obs):
                raise SessionError(f"check {action.check!r} done twice since the last repair")
            obs.append((Finding(action.check, outcome_index(check.outcomes, action.outcome, action.check), epoch),
                        "finding"))
        elif isinstance(action, RetractFinding):
            del obs[find(action.check, action.epoch)]
        elif isinstance(action, CorrectFinding):
            i = find(action.check, action.epoch)
            f, k = obs[i]
            if k == "verification":
                outcomes = (top_verification(model) if f.target == top
                            else verification_for(model, repairs[f.epoch - 1])).outcomes
            else:
                outcomes = model.check_by_id[f.target].outcomes
            obs[i] = (replace(f, outcome=outcome_index(outcomes, action.outcome, f.target)), k)
        elif isinstance(action, RecordRepair):
            if action.event not in model.event_by_id or action.event in repairs:
                raise SessionError(f"repair of {action.event!r} is not possible here")
            repairs.append(action.event)
        elif isinstance(action, Escalate):
            escalated_at = len(history)
        # skip, unskip and note change no finding
    confirmed = None
    if repairs and any(k == "verification" and f.epoch == len(repairs) and f.target == top and f.outcome == 0
                       for f, k in obs):
        confirmed = repairs[-1]
    return SessionData(tuple(f for f, _ in obs), tuple(repairs), confirmed, escalated=escalated_at is not None)


def model_sha256(spec_path: str | Path) -> str:
    """SHA-256 of a model file's bytes (what a session log's header records)."""
    from troubleshoot.session.logfile import file_sha256

    return file_sha256(spec_path)


def read_session(path: str, model: Model, sha256: str) -> tuple[SessionData | None, list[LogProblem]]:
    """One log as SessionData, with what was wrong with it; never raises for a bad log."""
    from troubleshoot.session.logfile import read_log

    try:
        contents = read_log(path)
    except LogError as exc:
        text = str(exc)
        kind = OTHER_VERSION if "format version" in text else EDITED if "edited" in text else DAMAGED
        return None, [LogProblem(path, kind, text)]
    except Exception as exc:  # noqa: BLE001 - a log must never stop the run: name it and go on
        return None, [LogProblem(path, DAMAGED, f"{path}: cannot be read ({type(exc).__name__}: {exc})")]
    problems = [LogProblem(path, TORN, w) for w in contents.warnings]
    shas = {contents.header.get("model_sha256")} | {
        getattr(line.action, "model_sha256", None) for line in contents.actions
        if getattr(line.action, "model_sha256", None) is not None}
    if shas != {sha256}:
        made_on = contents.header.get("model_path") or "an unnamed model"
        return None, problems + [LogProblem(path, OTHER_MODEL, f"{path}:1: made on another model ({made_on}, "
                                            f"SHA-256 {str(contents.header.get('model_sha256'))[:12]}...)"
                                            + (" or resumed on one" if len(shas) > 1 else ""))]
    try:
        data = fold_actions(model, [line.action for line in contents.actions])
    except (SessionError, KeyError, TypeError, AttributeError, ValueError, IndexError) as exc:
        return None, problems + [LogProblem(path, INCONSISTENT, f"{path}: an action the session would have "
                                                                f"refused ({exc}): edited or damaged")]
    return replace(data, time=str(contents.header.get("time") or "")), problems


def _read_piece(paths, shared) -> list:
    model, sha256 = shared
    return [read_session(p, model, sha256) for p in paths]


def log_files(inputs) -> list[str]:
    """Every ``*.jsonl`` under the folders given, and the files given, sorted, each once.

    Raises
    ------
    LearnError
        A path that does not exist.
    """
    found: list[str] = []
    for item in inputs:
        path = Path(item)
        if path.is_dir():
            found.extend(str(p) for p in sorted(path.rglob("*.jsonl")) if p.is_file())
        elif path.is_file():
            found.append(str(path))
        else:
            raise LearnError(f"{item}: no such file or folder; give session logs or folders of them")
    return list(dict.fromkeys(found))


# ---------------------------------------------------------------- parameters


@dataclass(frozen=True)
class Parameters:
    """Every learnable figure of a model, as arrays.

    Attributes
    ----------
    roots : numpy.ndarray
        P(failed) of each root event in ``model.hypotheses`` order (unlisted-cause events included).
    leaks : tuple of numpy.ndarray
        Per check and symptom (``model.checks + model.symptoms`` order): P(outcome) with no cause
        present, over the check's outcomes (false alarm = everything but the first).
    causes : tuple of numpy.ndarray
        Per check and symptom, shape (causes, outcomes): the outcome each cause produces on its own.
    """

    roots: np.ndarray
    leaks: tuple
    causes: tuple

    def flat(self) -> np.ndarray:
        return np.concatenate([self.roots] + [a.ravel() for a in self.leaks] + [a.ravel() for a in self.causes])


def _all_checks(model: Model):
    return model.checks + model.symptoms


def check_tables(check) -> tuple[np.ndarray, np.ndarray]:
    """(leak, causes) of a check over its outcomes in dominance order (level 0 normal, the last dominating).

    leak[l] = P(the false alarm alone produces level l); causes[i, l] the same for cause i when present
    (noisy-OR with two outcomes: (1 - false alarm, false alarm) and (1 - detection, detection)).
    """
    from troubleshoot.engine.observation import distribution, levels

    order = list(levels(check))
    leak = distribution(check, check.leak, check.false_alarm)[order]
    causes = np.array([distribution(check, c.shows, c.detection)[order] for c in check.causes])
    return leak, causes.reshape(len(check.causes), len(order))


def with_check_tables(check, leak: np.ndarray, causes: np.ndarray):
    """The check with its figures replaced by tables in the form :func:`check_tables` gives."""
    from troubleshoot.engine.observation import levels

    names = [check.outcomes[i] for i in levels(check)]

    def split(row):
        return tuple((name, float(p)) for name, p in zip(names[1:], row[1:]))

    two = len(names) == 2
    new_causes = tuple(replace(c, detection=float(1.0 - row[0]) if two else c.detection,
                               shows=split(row) if (c.shows or not two) else ())
                       for c, row in zip(check.causes, causes))
    new_causes = tuple(replace(c, detection=float(sum(p for _, p in c.shows))) if c.shows else
                       replace(c, detection=float(row[1:].sum()))
                       for c, row in zip(new_causes, causes))
    if check.leak or not two:
        return replace(check, leak=split(leak), false_alarm=float(leak[1:].sum()), causes=new_causes)
    return replace(check, false_alarm=float(leak[1:].sum()), causes=new_causes)


def parameters_of(model: Model) -> Parameters:
    """The model's own figures."""
    tables = [check_tables(c) for c in _all_checks(model)]
    return Parameters(np.array([model.prior_of(r) for r in model.hypotheses], dtype=float),
                      tuple(t[0] for t in tables), tuple(t[1] for t in tables))


def model_with(model: Model, params: Parameters, description: str | None = None) -> Model:
    """The model with the given figures (a failure rate is kept as a rate over the same exposure)."""
    p = dict(zip(model.hypotheses, params.roots.tolist()))
    events = []
    for e in model.basic_events:
        if e.rate is not None and e.exposure:
            rate = -math.log1p(-p[e.id]) / e.exposure if p[e.id] < 1.0 else e.rate
            events.append(replace(e, rate=rate, probability=exponential_probability(rate, e.exposure)))
        else:
            events.append(replace(e, probability=p[e.id]))
    gates = tuple(replace(g, unlisted=p[unlisted_id(g.id)]) if g.unlisted is not None else g for g in model.gates)
    checks = [with_check_tables(c, leak, causes) for c, leak, causes
              in zip(_all_checks(model), params.leaks, params.causes)]
    n = len(model.checks)
    return replace(model, basic_events=tuple(events), gates=gates, checks=tuple(checks[:n]),
                   symptoms=tuple(checks[n:]),
                   description=model.description if description is None else description)


# ---------------------------------------------------------------- E-step


@dataclass
class Counts:
    """Expected counts of one E-step over some sessions (summed piece by piece, in order).

    Attributes
    ----------
    roots : numpy.ndarray
        Expected number of sessions with each root failed.
    leaks, causes : list of numpy.ndarray
        Per check: expected count of each outcome produced by no cause (the leak), and by each cause.
    log_p : float
        Sum of log P(findings) (the complaint included) over the sessions.
    sessions : float
    root_informed : numpy.ndarray
        Sessions that moved each root's probability by at least :data:`INFORMS`.
    check_made : numpy.ndarray
        Times each check was made.
    refused : list of int
        Rows the engine refused (findings impossible under the model).
    """

    roots: np.ndarray
    leaks: list
    causes: list
    log_p: float = 0.0
    sessions: float = 0.0
    root_informed: np.ndarray = field(default_factory=lambda: np.zeros(0))
    check_made: np.ndarray = field(default_factory=lambda: np.zeros(0))
    refused: list = field(default_factory=list)
    #: (check index, outcome, presence pattern) -> [cause presence (S, I), summed P(cause states | findings)]:
    #: the hidden counts are linear in those weights, so they are worked out once per key (:meth:`settle`),
    #: and every check made with the same causes present in the same states of its family shares a key.
    pending: dict = field(default_factory=dict)

    @classmethod
    def zeros(cls, params: Parameters) -> Counts:
        return cls(np.zeros_like(params.roots), [np.zeros_like(a) for a in params.leaks],
                   [np.zeros_like(a) for a in params.causes], 0.0, 0.0, np.zeros_like(params.roots),
                   np.zeros(len(params.leaks)))

    def add(self, other: Counts) -> None:
        self.roots += other.roots
        for mine, theirs in zip(self.leaks, other.leaks):
            mine += theirs
        for mine, theirs in zip(self.causes, other.causes):
            mine += theirs
        self.log_p += other.log_p
        self.sessions += other.sessions
        self.root_informed += other.root_informed
        self.check_made += other.check_made
        self.refused.extend(other.refused)
        for key, (present, weights) in other.pending.items():
            slot = self.pending.get(key)
            if slot is None:
                self.pending[key] = [present, weights]
            else:
                slot[1] = slot[1] + weights

    def settle(self, params: Parameters) -> Counts:
        """Turn the summed cause-state weights into expected outcome counts of every leak and cause."""
        for (j, outcome, _pattern), (present, weights) in self.pending.items():
            leak_c, cause_c = hidden_outcome_counts(present, weights, params.leaks[j], params.causes[j], outcome)
            self.leaks[j] += leak_c
            self.causes[j] += cause_c
        self.pending = {}
        return self


def hidden_outcome_counts(present: np.ndarray, weights: np.ndarray, leak: np.ndarray, causes: np.ndarray,
                          outcome: int) -> tuple[np.ndarray, np.ndarray]:
    """Expected outcome counts of the leak and of each cause, given the check's observed outcome.

    Parameters
    ----------
    present : numpy.ndarray of bool, shape (S, I)
        For each joint state s of the check's causes, which of its n_causes causes are present.
    weights : numpy.ndarray, shape (S,)
        P(s | every finding of the session), this one included.
    leak : numpy.ndarray, shape (K,)
    causes : numpy.ndarray, shape (I, K)
        Outcome distributions (first outcome = normal) of the leak and of each cause on its own.
    outcome : int
        The outcome observed, y.

    Returns
    -------
    leak_counts : numpy.ndarray, shape (K,)
    cause_counts : numpy.ndarray, shape (I, K)
        E[number of times the leak / cause i produced outcome k]: a present cause produces one
        outcome per check made, an absent cause none.

    Notes
    -----
    Noisy-MAX (noisy-OR with two outcomes): each present cause i, and the leak, produces an outcome
    Z_i independently, and the check shows Y = max_i Z_i. With F_i the cumulative distribution of
    Z_i, P(Y = y) = prod_i F_i(y) - prod_i F_i(y - 1), and P(Z_i = k, Y = y) is
    q_ik (prod_(j != i) F_j(y) - prod_(j != i) F_j(y - 1)) for k < y, q_iy prod_(j != i) F_j(y)
    for k = y, and 0 above.

    References
    ----------
    F. J. Díez, UAI 1993 (noisy-MAX); Heckerman & Breese 1996 (the hidden per-cause variables).
    """
    y = int(outcome)
    S, n_causes = present.shape
    K = leak.shape[0]
    cdf = np.cumsum(causes, axis=1) if n_causes else np.zeros((0, K))
    leak_cdf = np.cumsum(leak)
    # Columns: the leak, then each cause (an absent cause is always at the first outcome: F = 1).
    at_y = np.ones((S, n_causes + 1))
    below = np.ones((S, n_causes + 1))
    at_y[:, 0] = leak_cdf[y]
    below[:, 0] = leak_cdf[y - 1] if y > 0 else 0.0
    if n_causes:
        at_y[:, 1:] = np.where(present, cdf[:, y], 1.0)
        below[:, 1:] = np.where(present, cdf[:, y - 1] if y > 0 else 0.0, 1.0 if y > 0 else 0.0)
    p_y = at_y.prod(axis=1) - below.prod(axis=1)
    use = (weights > 0) & (p_y > 0)
    w = np.where(use, weights / np.where(use, p_y, 1.0), 0.0)
    # Products over every column but one, from prefix and suffix products (no division by zero).
    def without_each(a):
        ones = np.ones((S, 1))
        left = np.cumprod(np.hstack([ones, a[:, :-1]]), axis=1)
        right = np.cumprod(np.hstack([ones, a[:, :0:-1]]), axis=1)[:, ::-1]
        return left * right

    others_at, others_below = without_each(at_y), without_each(below)
    mask = np.hstack([np.ones((S, 1)), present.astype(float)])  # the leak is always there; a cause when present
    wm = w[:, None] * mask
    shown_here = np.einsum("sc,sc->c", wm, others_at)
    shown_above = np.einsum("sc,sc->c", wm, others_at - others_below)
    tables = np.vstack([leak[None, :], causes])
    counts = np.zeros((n_causes + 1, K))
    counts[:, :y] = tables[:, :y] * shown_above[:, None]
    counts[:, y] = tables[:, y] * shown_here
    return counts[0], counts[1:].reshape(n_causes, K)


def _cause_presence(engine, net, repairs, check, epoch: int) -> tuple[np.ndarray, tuple]:
    """(S, I) bool: for each joint state of the check's family nodes at ``epoch``, which causes are present.

    With it a hashable form of the same table (its shape and bytes), under which equal tables meet.
    """
    cache = getattr(engine, "presence", None)
    # What the check read then depends on the repairs made before it, not after.
    key = (tuple(repairs[:epoch]), check.id, epoch)
    if cache is not None and key in cache:
        return cache[key]
    fam = net.families[(check.id, epoch)]
    m = len(fam.nodes)
    states = np.arange(2**m)
    bits = ((states[:, None] >> (m - 1 - np.arange(m))) & 1).astype(bool) if m else np.zeros((1, 0), bool)
    cols = []
    for cause in check.causes:
        node = net.node_for(cause.target, epoch)
        if isinstance(node, bool):
            cols.append(np.full(len(states), node))
        else:
            cols.append(bits[:, fam.nodes.index(node)])
    table = np.stack(cols, axis=1) if cols else np.zeros((len(states), 0), bool)
    out = (table, (table.shape, table.tobytes()))
    if cache is not None:
        cache[key] = out
    return out


class FleetEngine(Engine):
    """An engine for many sessions and many sets of figures of one model structure.

    The session engine keeps, of the logic before the last repair, only what
    that session's findings read, so its tree is as small as can be; across
    a fleet that is a new tree for almost every session. Here the tree for a
    sequence of repairs carries every check and the top event at every
    earlier epoch, so all sessions with those repairs share it (the extra
    parts are barren where unobserved: the posteriors are the same). And EM
    changes only the figures, never the structure: a tree compiled under
    earlier figures (kept in ``structures``) is refitted (new root tables,
    new check likelihoods, new clique potentials) instead of compiled again.

    Parameters
    ----------
    model : Model
    structures : dict, optional
        Trees compiled under any figures of the same structure, shared between engines.
    """

    cache_size = 4096

    def __init__(self, model: Model, structures: dict | None = None):
        self._structures = {} if structures is None else structures
        #: (repairs, check, epoch) -> which causes are present in each state of the check's family.
        self.presence = self._structures.setdefault("presence", {})
        #: Check families under these figures, by (check, epoch, the nodes its causes stand on): most
        #: trees fold a check onto the same nodes, so one family (and its likelihood) serves them all.
        self.families: dict = {}
        #: Likelihood factors under these figures, by (family, outcome, axis order, shape): shared by trees.
        self.factors: dict = {}
        #: repairs -> the key of their tree (what it carries depends only on how many repairs there are).
        self._keys = self._structures.setdefault("keys", {})
        #: findings -> those left once the implied ones are dropped (the structure decides, not the figures).
        self._kept = self._structures.setdefault("kept", {})
        super().__init__(model)

    def kept_findings(self, findings: tuple) -> tuple:
        """``tuple(self.implied_dropped(findings))``, worked out once per distinct findings."""
        kept = self._kept.get(findings)
        if kept is None:
            kept = self._kept[findings] = tuple(self.implied_dropped(findings))
        return kept

    def compiled(self, repairs, past_targets=frozenset()):
        repairs = tuple(repairs)
        key = self._keys.get(repairs)
        if key is None:
            now = len(repairs)
            everything = frozenset((c.id, e) for c in self.model.checks + self.model.symptoms for e in range(now)) \
                | frozenset((self.model.top, e) for e in range(now))
            key = self._keys[repairs] = (repairs, everything)
        if key in self._trees:
            return self._trees[key]
        everything = key[1]
        known = self._structures.get(key)
        if known is None:
            canonical = self._structures.get("canonical")
            if canonical is None:
                canonical = self._structures["canonical"] = _CanonicalEngine(self.model)
            known = _Structure(*canonical.compiled(repairs, everything))
            self._structures[key] = known
        self._trees[key] = known.refit(self.model, self.families)
        return self._trees[key]

    def _evidence(self, net, tree, finding):
        # A tree serves every session with its repairs: a finding's likelihood, placed in its clique,
        # is the same for all of them (the factor is only read by the propagation).
        memo = getattr(tree, "evidence_memo", None)
        if memo is None:
            return super()._evidence(net, tree, finding)
        found = memo.get(finding)
        if found is None:
            found = memo[finding] = self._placed(net, tree, finding)
        return found

    def _placed(self, net, tree, finding):
        """:meth:`Engine._evidence` for a check's finding, its factor shared by the trees of these figures.

        The trees of a fleet put one check family (same nodes) in cliques of the same shape: the
        factor, the likelihood transposed and reshaped there, is made once per figures and shared.
        """
        if finding.target not in self.model.check_by_id:
            return super()._evidence(net, tree, finding)
        self._validate(finding, net.epochs)
        fam = net.families[(finding.target, finding.epoch)]
        if not fam.nodes:
            return super()._evidence(net, tree, finding)
        c, order, shape = tree.evidence_placement(fam.nodes)
        key = (fam.check, fam.epoch, fam.nodes, finding.outcome, order, shape)
        factor = self.factors.get(key)
        if factor is None:
            lik = fam.p_outcome(finding.outcome)
            factor = np.ascontiguousarray(np.transpose(lik, order) if len(order) > 1 else lik).reshape(shape)
            self.factors[key] = factor
        return Evidence(c, factor)


class _CanonicalEngine(Engine):
    """The model's structure with every root at probability 1/2: what every refit starts from.

    Multiplying a clique by 2 (1 - p) and 2 p is exact in floating point, so a refitted tree holds
    the same bits whichever figures were current when its structure was first met (in any process).
    """

    cache_size = 4096

    def __init__(self, model: Model):
        half = replace(parameters_of(model), roots=np.full(len(model.hypotheses), 0.5))
        super().__init__(model_with(model, half))


class _Families(dict):
    """A network's check families, each built when first asked for (EM reads only the checks made)."""

    def __init__(self, net, model: Model, keys, shared: dict | None = None, folded: dict | None = None):
        super().__init__()
        self._net = net
        self._model = model
        self._keys = tuple(keys)
        self._shared = {} if shared is None else shared
        self._folded = {} if folded is None else folded

    def items(self):
        for key in self._keys:  # a reader of every family (the batch ranking) gets every one
            self[key]
        return super().items()

    def __missing__(self, key):
        from troubleshoot.engine.observation import check_family

        # Where the causes stand is the structure's (kept in ``folded`` across figures); the family is the figures'.
        folded = self._folded.get(key)
        if folded is None:
            check = self._model.check_by_id[key[0]]
            folded = self._folded[key] = (check.id, key[1], tuple(self._net.node_for(c.target, key[1])
                                                                   for c in check.causes))
        family = self._shared.get(folded)
        if family is None:
            check = self._model.check_by_id[key[0]]
            family = self._shared[folded] = check_family(check, key[1], dict(zip((c.target for c in check.causes),
                                                                                  folded[2])).__getitem__)
        self[key] = family
        return family


class _Structure:
    """A (network, tree) compiled with every root at 1/2, kept for its structure."""

    def __init__(self, net, tree):
        self.net, self.tree = net, tree
        tree.separator_sum_plans()  # built once here, shared by every refitted copy
        #: (check, epoch) -> (check, epoch, the nodes its causes stand on): the families' keys, per structure.
        self.folded: dict = {}
        #: Plans of this structure kept across figures (the root columns, :func:`_root_columns`).
        self.placements: dict = {}
        self.slots = []
        for r in net.model.hypotheses:
            if r not in tree.index:
                continue
            i = tree.index[r]
            c = int(tree.var_host[i])  # the clique a single variable's table went into
            shape = [1] * len(tree.cliques[c])
            shape[tree.cliques[c].index(i)] = 2
            self.slots.append((r, int(tree.offsets[c]), int(tree.offsets[c + 1]), tree.shapes[c], tuple(shape)))

    def refit(self, model: Model, families: dict | None = None):
        """The network and tree with ``model``'s figures: root tables into their cliques, families anew.

        The network's graph stays the structure's (its root tables are the 1/2 it was compiled
        with); inference reads only the tree's potentials and the families. ``families`` holds
        check families already built under the same figures (shared between trees).
        """
        import copy

        net = copy.copy(self.net)
        net.model = model
        net.families = _Families(net, model, self.net.families, families, self.folded)
        tree = copy.copy(self.tree)
        tree.network = net
        tree.families = _Families(net, model, self.tree.families, families, self.folded)
        tree.placements = self.placements
        tree._batch_plans = {}  # they hold the check tables of the figures compiled with
        tree.evidence_memo = {}  # FleetEngine's: each finding's likelihood in this tree
        base = self.tree.base.copy()
        for root, start, stop, clique_shape, shape in self.slots:
            p = model.prior_of(root)
            base[start:stop].reshape(clique_shape)[...] *= np.array([2.0 * (1.0 - p), 2.0 * p]).reshape(shape)
        tree.base = base
        return net, tree


_ENGINES = threading.local()


def _engine_for(token: str, model: Model) -> Engine:
    """This thread's engine for a set of figures (keyed by their digest), its trees refitted, not compiled."""
    if getattr(_ENGINES, "token", None) != token:
        if getattr(_ENGINES, "structure", None) != structure_of(model):
            _ENGINES.structure = structure_of(model)
            _ENGINES.trees = {}
        _ENGINES.engine = FleetEngine(model, _ENGINES.trees)
        _ENGINES.token = token
    return _ENGINES.engine


def structure_of(model: Model):
    """What a compiled tree depends on besides the figures: the ids, the gates, which causes each check reads."""
    return (model.top, model.hypotheses, tuple((g.id, g.kind, g.inputs, g.k, g.condition) for g in model.gates),
            tuple((c.id, c.outcomes, tuple(x.target for x in c.causes)) for c in model.checks + model.symptoms))


def session_counts(engine: Engine, params: Parameters, data: SessionData, weight: float, into: Counts,
                   prior_marginals: np.ndarray | None = None) -> None:
    """Add one session's expected counts (times ``weight``, identical sessions) to ``into``.

    The checks' counts are pending until ``into.settle(params)``.

    Raises
    ------
    ImpossibleFindings
        The session's findings have probability zero under the figures.
    """
    if rows_counts(engine, params, [(data, weight)], into, prior_marginals):
        engine.propagate(data.findings, data.repairs)  # raises, naming the findings in conflict
        raise ImpossibleFindings(["the findings"])  # pragma: no cover - the engine raised already


def rows_counts(engine: Engine, params: Parameters, rows, into: Counts,
                prior_marginals: np.ndarray | None = None) -> list[int]:
    """Add the expected counts of sessions that share their repairs, propagated together.

    Parameters
    ----------
    engine : FleetEngine
    params : Parameters
        The figures ``engine`` holds.
    rows : list of (SessionData, float)
        Sessions, all with the same repairs, and their weights (how many identical sessions).
    into : Counts
        Where each row's counts, times its weight, are added (checks pending until ``settle``).
    prior_marginals : numpy.ndarray, optional
        P(root failed | complaint) under the figures, to count the sessions informing each root.

    Returns
    -------
    list of int
        Positions of the rows whose findings are impossible under the figures (nothing added for them).

    Notes
    -----
    One join tree serves every session with the same repairs (:class:`FleetEngine`), so the rows
    are propagated as one array (:meth:`troubleshoot.engine.jointree.JoinTree.propagate_many`).
    Everything added is linear in the weights: the root marginals, log P(findings), and for each
    (check, epoch, outcome) the weighted sum of the check's clique tables, marginalised once to
    its causes' joint.
    """
    model = engine.model
    repairs = tuple(rows[0][0].repairs)
    now = len(repairs)
    kept = getattr(engine, "kept_findings", None)
    findings = [kept(d.findings) if kept is not None else tuple(engine.implied_dropped(d.findings)) for d, _ in rows]
    net, tree = engine.compiled(repairs, frozenset((f.target, f.epoch) for fs in findings for f in fs
                                                   if f.epoch < now))
    count = len(rows)
    log_constant = np.zeros(count)
    refused: set[int] = set()
    placed: dict = {}
    for r, fs in enumerate(findings):
        for f in fs:
            ev = engine._evidence(net, tree, f)
            if not isinstance(ev, Evidence):  # a constant likelihood (the finding reads a constant)
                if ev.value <= 0.0:
                    refused.add(r)
                else:
                    log_constant[r] += float(np.log(ev.value))
                continue
            slot = placed.get(f)
            if slot is None:
                placed[f] = (ev, [r])
            else:
                slot[1].append(r)
    work, log_p, possible = tree.propagate_many(count, [(ev, np.array(rs, dtype=np.int64))
                                                        for ev, rs in placed.values()])
    refused |= {r for r in range(count) if not possible[r]}
    keep = np.array([r not in refused for r in range(count)])
    weights = np.array([float(w) for _, w in rows]) * keep
    # Root marginals of every row, from each root's clique (its table is the posterior joint): the
    # entries where the root is failed, gathered and summed root by root in one call.
    columns, starts = _root_columns(tree, model)
    marg = np.add.reduceat(work[:, columns], starts, axis=1) if len(starts) else np.zeros((count, 0))
    marg = np.clip(marg, 0.0, 1.0)
    marg[~keep] = 0.0
    into.roots += (weights[:, None] * marg).sum(axis=0)
    into.log_p += float(np.sum(np.where(keep, weights * (log_p + log_constant), 0.0)))
    into.sessions += float(weights.sum())
    if prior_marginals is not None:
        into.root_informed += (weights[:, None] * (np.abs(marg - prior_marginals) >= INFORMS)).sum(axis=0)
    # Each check made: the weighted sum of its family's clique tables, per (repairs before, check, epoch, outcome).
    index = _check_index(model)
    groups: dict = {}
    for r, (data, _) in enumerate(rows):
        if not keep[r]:
            continue
        for f in data.findings:
            j = index.get(f.target)
            if j is None:
                continue
            groups.setdefault((f.target, f.epoch, f.outcome, j), []).append(r)
    for (target, epoch, outcome, j), rs in groups.items():
        check = model.check_by_id[target]
        fam = net.families[(target, epoch)]
        picked = np.array(rs, dtype=np.int64)
        w = weights[picked]
        into.check_made[j] += float(w.sum())
        if fam.nodes:
            c, drop, perm = tree.joint_plan(tuple(fam.nodes))
            table = (w[:, None] * work[picked, int(tree.offsets[c]):int(tree.offsets[c + 1])]).sum(axis=0)
            table = table.reshape(tree.shapes[c])
            summed = table.sum(axis=drop) if drop else table
            joint = (np.transpose(summed, perm) if perm is not None else summed).ravel()
        else:
            joint = np.array([float(w.sum())])
        # The hidden counts depend on the joint only through which causes each of its states has
        # present: every (check, outcome, presence pattern) is one key, whatever the repairs and epoch.
        present, pattern = _cause_presence(engine, net, repairs, check, epoch)
        key = (j, fam.order.index(outcome), pattern)
        slot = into.pending.get(key)
        if slot is None:
            into.pending[key] = [present, joint]
        else:
            slot[1] = slot[1] + joint
    return sorted(refused)


def _root_columns(tree, model: Model) -> tuple[np.ndarray, np.ndarray]:
    """Columns of a tree's tables where each root (``model.hypotheses`` order) is failed, and where each begins.

    Kept with the tree's structure when it has one (a fleet tree's ``placements``).
    """
    plans = getattr(tree, "placements", None)
    found = plans.get("root columns") if plans is not None else None
    if found is None:
        columns: list[np.ndarray] = []
        starts: list[int] = []
        for root in model.hypotheses:
            i = tree.index[root]
            c = int(tree.var_host[i])
            axis = tree.cliques[c].index(i)
            size = len(tree.cliques[c])
            entries = np.arange(1 << size).reshape(1 << axis, 2, 1 << (size - 1 - axis))[:, 1, :].ravel()
            starts.append(sum(len(x) for x in columns))
            columns.append(int(tree.offsets[c]) + entries)
        found = (np.concatenate(columns) if columns else np.zeros(0, np.int64), np.array(starts, dtype=np.int64))
        if plans is not None:
            plans["root columns"] = found
    return found


def _levels(check) -> tuple[int, ...]:
    from troubleshoot.engine.observation import levels

    return levels(check)


def _check_index(model: Model) -> dict[str, int]:
    return {c.id: j for j, c in enumerate(_all_checks(model))}


class Packed:
    """Something sent to every piece of work, pickled once where it is made and unpickled once per process.

    EM sends the same rows in every iteration, and the same figures with every piece of an
    iteration: as bytes they cost the sender a copy, and each process decodes a key only the first
    time it meets it (:func:`unpacked`). Nothing depends on which process decoded what.
    """

    __slots__ = ("key", "data")

    def __init__(self, kind: str, group: str, value):
        import pickle

        self.data = pickle.dumps(value, protocol=pickle.HIGHEST_PROTOCOL)
        # Known by its own bytes: equal keys are equal values, whoever made them and however cut.
        self.key = (kind, group, hashlib.sha256(self.data).hexdigest())

    def __getstate__(self):
        return (self.key, self.data)

    def __setstate__(self, state):
        self.key, self.data = state


#: This process's decoded Packed values: kind -> group -> key -> value (see :func:`unpacked`).
_UNPACKED: dict = {}
_UNPACKED_LOCK = threading.Lock()
#: Groups of each kind kept (the figures of the last iterations, the rows of the last tables).
UNPACKED_GROUPS = 2


def unpacked(packed: Packed):
    """The value of ``packed``, decoded once in this process.

    A key is (kind, group, digest of the bytes): only the latest :data:`UNPACKED_GROUPS` groups of
    each kind are kept (a new table or new figures let the old ones go).
    """
    import pickle

    kind, group = packed.key[0], packed.key[1]
    groups = _UNPACKED.get(kind)
    found = groups.get(group) if groups is not None else None
    value = found.get(packed.key) if found is not None else None
    if value is None:
        value = pickle.loads(packed.data)
        with _UNPACKED_LOCK:
            groups = _UNPACKED.setdefault(kind, {})
            if group not in groups:
                while len(groups) >= UNPACKED_GROUPS:
                    groups.pop(next(iter(groups)))
                groups[group] = {}
            groups[group][packed.key] = value
    return value


def _estep_piece(piece, shared) -> Counts:
    """One piece of the E-step: rows (index, SessionData, count) under the shared figures (both Packed)."""
    token, model, params, prior_marginals = unpacked(shared)
    piece = unpacked(piece)
    engine = _engine_for(token, model)
    counts = Counts.zeros(params)
    start = 0
    while start < len(piece):
        # The rows are sorted by their repairs: each run of equal repairs is one batch.
        stop = start + 1
        while stop < len(piece) and piece[stop][1].repairs == piece[start][1].repairs:
            stop += 1
        batch = piece[start:stop]
        try:
            refused = rows_counts(engine, params, [(d, float(w)) for _, d, w in batch], counts, prior_marginals)
            counts.refused.extend(batch[r][0] for r in refused)
        except SessionError:
            # A row the engine refuses outright (a finding dated after its repairs...): row by row, to name it.
            for index, data, weight in batch:
                try:
                    if rows_counts(engine, params, [(data, float(weight))], counts, prior_marginals):
                        counts.refused.append(index)
                except SessionError:
                    counts.refused.append(index)
        start = stop
    engine.forget()
    return counts  # pending: settled once all pieces are summed


def _unflat(template: Parameters, flat: np.ndarray) -> Parameters:
    """Figures shaped like ``template`` from a flat vector (the order of :meth:`Parameters.flat`)."""
    pos = len(template.roots)
    roots = flat[:pos].copy()
    shaped = []
    for a in template.leaks + template.causes:
        shaped.append(flat[pos:pos + a.size].reshape(a.shape).copy())
        pos += a.size
    n = len(template.leaks)
    return Parameters(roots, tuple(shaped[:n]), tuple(shaped[n:]))


def _token(params: Parameters) -> str:
    return hashlib.sha256(params.flat().tobytes()).hexdigest()


def _digest(table) -> str:
    """SHA-256 of an E-step table's rows (what a process's decoded copy is known by)."""
    import pickle

    return hashlib.sha256(pickle.dumps([(i, d.findings, d.repairs, w) for i, d, w in table],
                                       protocol=pickle.HIGHEST_PROTOCOL)).hexdigest()


# ---------------------------------------------------------------- M-step


@dataclass(frozen=True)
class Prior:
    """Beta / Dirichlet pseudo-counts built from the model's figures.

    Attributes
    ----------
    roots_failed, roots_ok : numpy.ndarray
        Per root: weight / P(top) times p and times 1 - p (the units it takes to see ``weight``
        failed ones), so the prior speaks as ``weight`` sessions would.
    leaks, causes : tuple of numpy.ndarray
        ``weight`` times each outcome distribution.
    """

    roots_failed: np.ndarray
    roots_ok: np.ndarray
    leaks: tuple
    causes: tuple


def prior_from(params: Parameters, p_top: float, weight: float) -> Prior:
    units = weight / p_top if p_top > 0 else weight
    return Prior(units * params.roots, units * (1.0 - params.roots),
                 tuple(weight * a for a in params.leaks), tuple(weight * a for a in params.causes))


def _dirichlet_mean(alpha: np.ndarray, counts: np.ndarray) -> np.ndarray:
    total = alpha + counts
    sums = total.sum(axis=-1, keepdims=True)
    return np.where(sums > 0, total / np.where(sums > 0, sums, 1.0), alpha)


class TopProbability:
    """P(top event) for root probabilities, by the fault tree's decision diagram (the engine if too large)."""

    def __init__(self, model: Model):
        from troubleshoot.analysis.bdd import DiagramTooLarge, FaultTreeBdd

        self.model = model
        self.bdd: FaultTreeBdd | None = None
        try:
            self.bdd = FaultTreeBdd.from_model(model)
            position = {r: i for i, r in enumerate(model.hypotheses)}
            self.order = np.array([position[r] for r in self.bdd.order], dtype=np.int64)
        except DiagramTooLarge:
            self.bdd = None

    def __call__(self, roots: np.ndarray, params: Parameters) -> float:
        if self.bdd is not None:
            return replace(self.bdd, priors=roots[self.order]).probability()
        model = model_with(self.model, replace(params, roots=roots))
        return Engine(model).propagate().p_failed(model.top)


def roots_step(prior: Prior, counts: Counts, working: np.ndarray, unseen: float) -> np.ndarray:
    """Root probabilities: Beta posterior means over the sessions and ``unseen`` units that did not fail."""
    return (prior.roots_failed + counts.roots + unseen * working) / \
        (prior.roots_failed + prior.roots_ok + counts.sessions + unseen)


def unseen_for(p_top_target: float, prior: Prior, counts: Counts, working: np.ndarray, params: Parameters,
               top_probability: TopProbability) -> float:
    """How many unseen working units keep P(top) at ``p_top_target`` (bisection on a log scale).

    0 when even none gives a P(top) at or below the target.
    """
    def excess(unseen: float) -> float:
        return top_probability(roots_step(prior, counts, working, unseen), params) - p_top_target

    if excess(0.0) <= 0.0:
        return 0.0
    low, high = 0.0, max(1.0, counts.sessions)
    while excess(high) > 0.0:
        low, high = high, high * 4.0
        if high > 1e18:
            return high
    for _ in range(200):
        middle = math.sqrt(max(low, 1e-300) * high) if low > 0 else high / 2.0
        if excess(middle) > 0.0:
            low = middle
        else:
            high = middle
        if high - low <= 1e-13 * high:
            break
    return high


def log_prior(prior: Prior, params: Parameters) -> float:
    """log of the Beta / Dirichlet prior densities (up to constants) at the figures (MAP objective)."""
    def term(alpha, p):
        use = alpha > 0
        return float(np.sum(alpha[use] * np.log(np.maximum(p[use], 1e-300))))

    total = term(prior.roots_failed, params.roots) + term(prior.roots_ok, 1.0 - params.roots)
    for a, p in zip(prior.leaks + prior.causes, params.leaks + params.causes):
        total += term(a, p)
    return total


# ---------------------------------------------------------------- the run


@dataclass
class Figure:
    """One learned figure: before -> after with its interval and the sessions that informed it."""

    kind: str        # "root" or "detection" or "false-alarm"
    id: str          # root id, or check id, or "check:cause"
    label: str
    before: float
    after: float
    low: float
    high: float
    informed: float  # sessions (roots) / times made with the cause present (detection) / times made (false alarm)
    check: str = ""
    cause: str = ""
    outcome: str = ""


@dataclass
class LearnResult:
    """Everything ``learn`` found, for the learned model, the report, the JSON and the plot."""

    model: Model
    learned: Model
    params_before: Parameters
    params_after: Parameters
    figures: list
    sessions: int
    distinct: int
    logs: int
    problems: list
    iterations: int
    converged: bool
    log_likelihood: float
    history: list
    prior_weight: float
    exposure: float | None
    unseen_units: float
    p_top_before: float
    p_top_after: float
    confirmed: dict
    predicted: dict
    expected_failed: dict
    escalated: int
    dates: tuple
    model_sha256: str
    where: str
    #: Wall-clock seconds spent reading the logs and in EM (E-steps, M-steps, the report's counts).
    seconds_reading: float = 0.0
    seconds_em: float = 0.0
    workers: int = 1


def read_sessions(model: Model, model_sha: str, paths: list[str], executor=None,
                  progress=None) -> tuple[list[tuple[str, SessionData]], list[LogProblem]]:
    """Every usable session among the logs (in the order of ``paths``) and what was wrong with the others."""
    from troubleshoot.study.execution import InProcess, chunks

    executor = executor or InProcess()
    pieces = chunks(list(paths), LOGS_PER_PIECE)

    def read_progress(done, total):
        if progress is not None:
            progress(min(len(paths), done * LOGS_PER_PIECE), len(paths))

    read = executor.map(_read_piece, pieces, (model, model_sha), progress=read_progress)
    problems: list[LogProblem] = []
    sessions: list[tuple[str, SessionData]] = []
    for piece_paths, piece in zip(pieces, read):
        for path, (data, probs) in zip(piece_paths, piece):
            problems.extend(probs)
            if data is not None:
                sessions.append((path, data))
    return sessions, problems


def learn(model: Model, model_sha: str, paths: list[str], *, prior_weight: float = DEFAULT_PRIOR_WEIGHT,
          exposure: float | None = None, executor=None, progress=None, max_iterations: int = MAX_ITERATIONS,
          tolerance: float = TOLERANCE) -> LearnResult:
    """Learn a model's figures from session logs (see the module notes).

    Parameters
    ----------
    model : Model
    model_sha : str
        SHA-256 of the model file; only logs made on it are used.
    paths : list of str
        Session log files (see :func:`log_files`).
    prior_weight : float
        What the model's own figures are worth, in sessions (> 0).
    exposure : float, optional
        Unit-periods of service the sessions come from (at least the number of sessions).
    executor : optional
        From :func:`troubleshoot.study.execution.executor_for`; default in this process.
    progress : callable, optional
        ``progress(done, total)`` as logs are read, then ``progress("EM iteration k: log-likelihood
        L, change D")`` after each E-step (see :class:`troubleshoot.progress.ProgressDisplay`).

    Raises
    ------
    LearnError
        No usable session, or a bad prior weight or exposure.
    """
    started = time.perf_counter()
    sessions, problems = read_sessions(model, model_sha, paths, executor, progress)
    reading = time.perf_counter() - started
    if progress is not None and paths:
        progress(f"read {len(paths):,} logs in {reading:.1f} s ({len(paths) / max(reading, 1e-9):,.0f} logs/s)")
    if not sessions:
        raise LearnError(f"none of the {len(paths)} log(s) given is a usable session of model {model.name!r}"
                         + (f" (first problem: {problems[0].message})" if problems else ""))
    result = learn_sessions(model, sessions, model_sha=model_sha, problems=problems, logs=len(paths),
                            prior_weight=prior_weight, exposure=exposure, executor=executor, progress=progress,
                            max_iterations=max_iterations, tolerance=tolerance)
    return replace(result, seconds_reading=reading)


def learn_sessions(model: Model, sessions: list[tuple[str, SessionData]], *, model_sha: str = "",
                   problems: list | None = None, logs: int | None = None,
                   prior_weight: float = DEFAULT_PRIOR_WEIGHT, exposure: float | None = None, executor=None,
                   progress=None, max_iterations: int = MAX_ITERATIONS, tolerance: float = TOLERANCE) -> LearnResult:
    """EM over sessions already read: (name, SessionData) pairs. See :func:`learn`."""
    from troubleshoot.study.execution import InProcess, chunks

    if not (prior_weight > 0 and math.isfinite(prior_weight)):
        raise LearnError(f"--prior-weight must be a positive number of sessions, not {prior_weight!r}")
    if not sessions:
        raise LearnError("no session to learn from")
    if exposure is not None and not (math.isfinite(exposure) and exposure >= len(sessions)):
        raise LearnError(f"--exposure must be at least the number of sessions ({len(sessions)} unit-periods), "
                         f"not {exposure!r}")
    executor = executor or InProcess()
    problems = list(problems or [])
    logs = len(sessions) if logs is None else logs
    em_started = time.perf_counter()

    # Identical sessions are one row; rows sorted by their repairs so a piece compiles few join trees.
    rows: dict = {}
    paths_of: dict = {}
    for path, data in sessions:
        key = (data.findings, data.repairs)
        rows[key] = rows.get(key, 0) + 1
        paths_of.setdefault(key, []).append(path)
    keys = sorted(rows, key=lambda k: (len(k[1]), k[1], len(k[0])))
    before = parameters_of(model)
    engine0 = Engine(model)
    p_top0 = engine0.propagate().p_failed(model.top)
    prior = prior_from(before, p_top0, prior_weight)
    top_probability = TopProbability(model)
    history: list[tuple[int, float, float]] = []
    state: dict[str, Any] = {"keys": keys, "unseen": 0.0 if exposure is None else float(exposure) - len(sessions),
                             "previous": None}
    dropped: list[LogProblem] = []
    structures: dict = {}

    def em_step(params: Parameters):
        """One E-step at ``params`` and the M-step after it: (counts, objective, next figures)."""
        started = time.perf_counter()
        while True:
            current = model_with(model, params)
            engine = FleetEngine(current, structures)
            prior_marg = engine.propagate([Finding(model.top, 1, 0)]).root_marginals()
            if state.get("pieces") is None:  # the rows change only when some are left out
                table = [(i, SessionData(k[0], k[1]), rows[k]) for i, k in enumerate(state["keys"])]
                version = _digest(table)
                state["pieces"] = [Packed("rows", version, piece) for piece in chunks(table, ROWS_PER_PIECE)]
            token = _token(params)
            results = executor.map(_estep_piece, state["pieces"],
                                   Packed("figures", token, (token, current, params, prior_marg)))
            counts = Counts.zeros(params)
            for piece_counts in results:
                counts.add(piece_counts)
            # The hidden outcome counts are linear in the summed weights: worked out once per E-step.
            counts.settle(params)
            if not counts.refused:
                break
            # Findings the model calls impossible: name the logs, leave them out, redo this E-step.
            for i in sorted(counts.refused):
                for path in paths_of[state["keys"][i]]:
                    dropped.append(LogProblem(path, IMPOSSIBLE, f"{path}: its findings are impossible under the "
                                                                "model (a zero figure contradicts them)"))
            refused = {state["keys"][i] for i in counts.refused}
            state["keys"] = [k for k in state["keys"] if k not in refused]
            state["pieces"] = None
            if not state["keys"]:
                raise LearnError("every session's findings are impossible under the model")
        p_top = engine.propagate().p_failed(model.top)
        # The data's log-likelihood under these figures.
        if exposure is None:
            log_lik = counts.log_p - counts.sessions * math.log(p_top)
        else:
            log_lik = counts.log_p + (state["unseen"] * math.log1p(-p_top) if state["unseen"] else 0.0)
        objective = log_lik + log_prior(prior, params)
        change = objective - state["previous"] if state["previous"] is not None else math.nan
        state["previous"] = objective
        history.append((len(history), log_lik, change))
        if progress is not None:
            seconds = time.perf_counter() - started
            progress(f"EM iteration {len(history) - 1}: log-likelihood {log_lik:,.4f}"
                     + ("" if math.isnan(change) else f", change {change:+.3g}")
                     + f"; E-step {seconds:.2f} s, {counts.sessions / max(seconds, 1e-9):,.0f} sessions/s")
        # M-step: every figure its Beta / Dirichlet posterior mean.
        working = engine.propagate([Finding(model.top, 0, 0)]).root_marginals() if p_top < 1.0 \
            else np.zeros_like(params.roots)
        if exposure is None:
            state["unseen"] = unseen_for(p_top0, prior, counts, working, params, top_probability)
        new = Parameters(roots_step(prior, counts, working, state["unseen"]),
                         tuple(_dirichlet_mean(a, c) for a, c in zip(prior.leaks, counts.leaks)),
                         tuple(_dirichlet_mean(a, c) for a, c in zip(prior.causes, counts.causes)))
        return counts, objective, new

    def moved(a: Parameters, b: Parameters) -> float:
        return float(np.max(np.abs(a.flat() - b.flat()))) if a.flat().size else 0.0

    # EM accelerated by squared extrapolation (SQUAREM, scheme S3): two EM steps, a step along their
    # second difference, one EM step from there kept only if the objective did not fall. Same fixed point.
    params = before
    converged = False
    while len(history) < max_iterations:
        _, objective0, first = em_step(params)
        if moved(first, params) <= tolerance:
            params, converged = first, True
            break
        _, objective1, second = em_step(first)
        if moved(second, first) <= tolerance or len(history) >= max_iterations:
            params, converged = second, moved(second, first) <= tolerance
            break
        r = first.flat() - params.flat()
        v = second.flat() - first.flat() - r
        norm_v = float(np.linalg.norm(v))
        alpha = min(-1.0, -float(np.linalg.norm(r)) / norm_v) if norm_v > 0 else -1.0
        jump = params.flat() - 2.0 * alpha * r + alpha * alpha * v
        inside = (params.flat() > 0.0) & (params.flat() < 1.0)  # a 0 or 1 figure never moves
        if alpha < -1.0 and np.all((jump[inside] > 1e-12) & (jump[inside] < 1.0 - 1e-12)):
            _, objective_jump, after_jump = em_step(_unflat(params, jump))
            params = after_jump if objective_jump >= objective1 else second
        else:
            params = second
    # One more E-step at the final figures, for the report's counts and log-likelihood.
    counts, _, _ = em_step(params)
    final_counts = counts
    keys = state["keys"]
    unseen = state["unseen"]
    iteration = len(history) - 1

    kept = set(keys)
    used = [(p, d) for p, d in sessions if (d.findings, d.repairs) in kept] if dropped else sessions
    problems.extend(dropped)
    result = _result(model, model_sha, params, before, prior, final_counts, used, problems, iteration, converged,
                     history, prior_weight, exposure, unseen, p_top0, len(keys), logs, executor.where)
    return replace(result, seconds_em=time.perf_counter() - em_started, workers=executor.workers)


def _result(model, model_sha, params, before, prior, counts, sessions, problems, iterations, converged, history,
            prior_weight, exposure, unseen, p_top0, distinct, logs, where) -> LearnResult:
    n = len(sessions)
    times = sorted(d.time for _, d in sessions if d.time)
    dates = (times[0][:10], times[-1][:10]) if times else ("", "")
    learned_desc = (
        f"Learned by troubleshoot learn from {n} session logs ({dates[0]} to {dates[1]}) made on the model with "
        f"SHA-256 {model_sha}; prior weight {prior_weight:g} sessions; "
        + (f"exposure {exposure:g} unit-periods." if exposure is not None
           else "P(top event) kept at the model's value (no exposure given).")
        + (f" {model.description}" if model.description else ""))
    learned = model_with(model, params, learned_desc)
    p_top_after = Engine(learned).propagate().p_failed(model.top)
    prior_engine = Engine(model).propagate([Finding(model.top, 1, 0)])
    p_given_top = dict(zip(model.hypotheses, prior_engine.root_marginals().tolist()))
    figures = []
    # Root events: Beta(alpha + expected failed, beta + expected working) over the sessions and unseen units.
    working = Engine(learned).propagate([Finding(model.top, 0, 0)]).root_marginals() if p_top_after < 1.0 \
        else np.zeros_like(params.roots)
    for i, r in enumerate(model.hypotheses):
        a = prior.roots_failed[i] + counts.roots[i] + unseen * working[i]
        b = prior.roots_ok[i] + (counts.sessions - counts.roots[i]) + unseen * (1.0 - working[i])
        low, high = beta_interval(a, b)
        figures.append(Figure("root", r, model.label_of(r), float(before.roots[i]), float(params.roots[i]),
                              low, high, float(counts.root_informed[i])))
    for j, check in enumerate(_all_checks(model)):
        made = float(counts.check_made[j])
        names = [check.outcomes[i] for i in _levels(check)]
        alpha = prior.leaks[j] + counts.leaks[j]
        for k in range(1, len(alpha)):
            low, high = beta_interval(alpha[k], alpha.sum() - alpha[k])
            figures.append(Figure("false-alarm", check.id, check.label, float(before.leaks[j][k]),
                                  float(params.leaks[j][k]), low, high, made, check.id, "", names[k]))
        for i, cause in enumerate(check.causes):
            alpha = prior.causes[j][i] + counts.causes[j][i]
            trials = float(counts.causes[j][i].sum())
            for k in range(1, len(alpha)):
                low, high = beta_interval(alpha[k], alpha.sum() - alpha[k])
                figures.append(Figure("detection", f"{check.id}:{cause.target}", check.label,
                                      float(before.causes[j][i][k]), float(params.causes[j][i][k]), low, high,
                                      trials, check.id, cause.target, names[k]))
    confirmed = {r: 0 for r in model.hypotheses}
    for _, d in sessions:
        if d.confirmed is not None:
            confirmed[d.confirmed] += 1
    predicted = {r: n * p_given_top[r] for r in model.hypotheses}
    expected = {r: float(counts.roots[i]) for i, r in enumerate(model.hypotheses)}
    return LearnResult(
        model=model, learned=learned, params_before=before, params_after=params, figures=figures, sessions=n,
        distinct=distinct, logs=logs, problems=problems, iterations=iterations, converged=converged,
        log_likelihood=history[-1][1], history=history, prior_weight=prior_weight, exposure=exposure,
        unseen_units=unseen, p_top_before=p_top0, p_top_after=p_top_after, confirmed=confirmed,
        predicted=predicted, expected_failed=expected, escalated=sum(1 for _, d in sessions if d.escalated),
        dates=dates, model_sha256=model_sha, where=where)


# ---------------------------------------------------------------- intervals


def _betacf(a: float, b: float, x: float) -> float:
    """Continued fraction of the incomplete beta function (modified Lentz)."""
    tiny = 1e-300
    qab, qap, qam = a + b, a + 1.0, a - 1.0
    c, d = 1.0, 1.0 - qab * x / qap
    d = 1.0 / (d if abs(d) > tiny else tiny)
    h = d
    for m in range(1, 1000):
        m2 = 2 * m
        aa = m * (b - m) * x / ((qam + m2) * (a + m2))
        d = 1.0 + aa * d
        d = 1.0 / (d if abs(d) > tiny else tiny)
        c = 1.0 + aa / c
        c = c if abs(c) > tiny else tiny
        h *= d * c
        aa = -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2))
        d = 1.0 + aa * d
        d = 1.0 / (d if abs(d) > tiny else tiny)
        c = 1.0 + aa / c
        c = c if abs(c) > tiny else tiny
        delta = d * c
        h *= delta
        if abs(delta - 1.0) < 1e-15:
            break
    return h


def beta_cdf(x: float, a: float, b: float) -> float:
    """The regularised incomplete beta function I_x(a, b): the Beta(a, b) distribution function.

    References
    ----------
    W. H. Press et al., *Numerical Recipes*, 3rd ed., 2007, section 6.4 (continued fraction).
    """
    if x <= 0.0:
        return 0.0
    if x >= 1.0:
        return 1.0
    log_front = (math.lgamma(a + b) - math.lgamma(a) - math.lgamma(b) + a * math.log(x) + b * math.log1p(-x))
    if x < (a + 1.0) / (a + b + 2.0):
        return math.exp(log_front) * _betacf(a, b, x) / a
    return 1.0 - math.exp(log_front) * _betacf(b, a, 1.0 - x) / b


def beta_quantile(q: float, a: float, b: float) -> float:
    """The q-quantile of Beta(a, b) (bisection on :func:`beta_cdf`); a or b = 0 puts all mass at 1 or 0."""
    if a <= 0.0:
        return 0.0
    if b <= 0.0:
        return 1.0
    low, high = 0.0, 1.0
    for _ in range(200):
        mid = 0.5 * (low + high)
        if beta_cdf(mid, a, b) < q:
            low = mid
        else:
            high = mid
        if high - low < 1e-14:
            break
    return 0.5 * (low + high)


def beta_interval(a: float, b: float, level: float = INTERVAL) -> tuple[float, float]:
    """Central ``level`` interval of Beta(a, b)."""
    tail = (1.0 - level) / 2.0
    return beta_quantile(tail, float(a), float(b)), beta_quantile(1.0 - tail, float(a), float(b))
