"""Surveys: the lag of many marker pairs, and whether a lead is systematic.

Each pair's lag is estimated on its own (:func:`align.lag.estimate_lag`), in parallel: on
worker processes of this machine by default (the per-pair work is Python-heavy and holds the
GIL, so threads do not help), or on a ``dask.distributed`` cluster when one is named. Records,
tie tables and transfers are made once per survey (per worker process), not once per pair. The pairs
are combined by Monte Carlo from their full lag distributions: every draw of the combined lag
is the inverse-variance weighted mean of one draw from each pair plus a between-pair deviation
whose variance is estimated from the scatter (DerSimonian & Laird 1986), so the combined
interval carries each pair's uncertainty, not only the scatter of the medians. Errors that
pairs share -- the absolute timescale error of a record several pairs use, the errors of the
tie points of one tie table -- are drawn once per Monte Carlo member for all of them, so the
combination carries their correlation. The lead is called systematic when the combined 95 %
interval excludes zero; when the pairs disagree more than their uncertainties allow
(Cochran's Q), the headline says so first, with the between-pair sd and its Q-profile
interval (Viechtbauer 2007), the pairs contributing most to Q and a prediction interval for a
new pair (Higgins, Thompson & Spiegelhalter 2009).

References
----------
DerSimonian, R. and Laird, N. (1986), Controlled Clinical Trials 7, 177-188,
doi:10.1016/0197-2456(86)90046-2.
Cochran, W. G. (1954), Biometrics 10, 101-129, doi:10.2307/3001666.
Viechtbauer, W. (2007), Statistics in Medicine 26, 37-52, doi:10.1002/sim.2514.
Higgins, J. P. T., Thompson, S. G. and Spiegelhalter, D. J. (2009), J. R. Stat. Soc. A 172,
137-159, doi:10.1111/j.1467-985X.2008.00552.x.
"""

from __future__ import annotations

import multiprocessing
import os
import uuid
from functools import lru_cache
from pathlib import Path

import numpy as np
from scipy.stats import chi2

import align.heterogeneity as het
from align.synchrony import chi2_statistic, dl_tau2, q_profile

from align.ages import convert_age
from align.errors import InputError
from align.figures import compact_marker
from align.lag import CAUTION, Sources, estimate_lag, lag_summary
from align.provenance import dataset_checksum, provenance, resolve_seed, sha256_file
from align.schema import (Heterogeneity, LagSettings, PairSpec, QShare, SurveyPair,
                          SurveyResult, SurveySpec, validate_as)

#: Significance level below which Cochran's Q leads the headline.
HETEROGENEITY_LEVEL = 0.05
#: How many of the largest contributions to Q are named.
LARGEST_SHARES = 3


def survey_spec(spec):
    """A validated :class:`SurveySpec` (a survey file is read by :func:`align.read_survey`)."""
    if isinstance(spec, (str, Path)):
        raise InputError("survey takes a survey spec, not a file; read the file with "
                         "align.read_survey", source=str(spec), field="spec")
    spec = spec if isinstance(spec, SurveySpec) else validate_as(SurveySpec, spec)
    if not spec.pairs and not (spec.table and spec.a and spec.b):
        raise InputError("a survey needs 'pairs', or a 'table' with 'a' and 'b'", field="pairs")
    return spec


def table_pairs(spec, sources):
    """One :class:`PairSpec` per row of the event table."""
    from align.columns import numeric_column
    from align.missing import find_sentinel
    from align.tables import read_table

    table = spec.table
    path = sources.path(table.path)
    if not Path(path).exists():
        raise InputError("no such event table", source=str(path), status=404)
    read = read_table(path)
    frame = read.frame
    for col in (table.label_column, table.age_column):
        if col not in frame.columns:
            raise InputError("no such column in the event table", source=str(path), field=col)
    if table.rows:
        missing = [r for r in table.rows if r not in set(frame[table.label_column].astype(str))]
        if missing:
            raise InputError(f"no row labelled {missing[0]!r}", source=str(path),
                             field=table.label_column)
    ages = numeric_column(frame[table.age_column], table.age_column, str(path), read.locate)
    found = find_sentinel(ages)
    if found is not None:
        kind, row = read.locate(found[2])
        raise InputError(f"an event at {found[0]:g}, far outside the other events: a "
                         "missing-value code? leave the row out", source=str(path),
                         field=table.age_column, row=row, row_kind=kind)
    ages = ages * _header_age_scale(table, path)
    keep = (frame[table.label_column].astype(str).isin(table.rows).to_numpy() if table.rows
            else np.ones(len(frame), dtype=bool))
    blank = keep & ~np.isfinite(ages)
    if blank.any():
        kind, row = read.locate(int(np.argmax(blank)))
        raise InputError("an event without an age", source=str(path), field=table.age_column,
                         row=row, row_kind=kind)
    pairs = []
    before, after = table.window
    for label, age in zip(frame[table.label_column].astype(str)[keep], ages[keep]):
        centre = float(convert_age(float(age), table.age_reference, spec.age_reference))
        window = [centre + before, centre + after]
        pairs.append(PairSpec(label=label,
                              a={**spec.a.model_dump(), "window": window},
                              b={**spec.b.model_dump(), "window": window}))
    return pairs


def _header_age_scale(table, path):
    """Years per stored unit of the event table's age column: its header unit (``age [ka
    b2k]``) when it states one; a reference there that differs from ``age_reference`` is
    refused."""
    from align.ages import parse_age_units
    from align.columns import split_header

    unit = split_header(table.age_column).unit
    if unit is None:
        return 1.0
    try:
        stated = parse_age_units(unit, field=table.age_column)
    except InputError as exc:
        raise exc.located(source=str(path)) from None
    if stated.reference not in (None, table.age_reference):
        raise InputError(f"the header says {stated.reference}, age_reference says "
                         f"{table.age_reference}; convert instead of relabelling",
                         source=str(path), field=table.age_column)
    return stated.scale or 1.0


class SurveySources(Sources):
    """A survey's sources: each record, tie table and transfer made once, then reused by every
    pair that names it (the pairs of a survey share a few records)."""

    def __init__(self, inner):
        super().__init__(inner.loaded)
        self.inner = inner
        self.made = {}

    def _once(self, key, make):
        if key not in self.made:
            self.made[key] = make()
        return self.made[key]

    def path(self, name):
        return self.inner.path(name)

    def record(self, spec):
        mapping = tuple(sorted((spec.mapping or {}).items()))
        return self._once(("record", spec.record, mapping), lambda: self.inner.record(spec))

    def ties(self, name):
        return self._once(("ties", name), lambda: self.inner.ties(name))

    def transfer(self, record, ties, reference, bridge_rate=None):
        # keyed by content: the same record converted to another age reference is a new
        # object; the tie table is the one object ``ties`` keeps
        key = ("transfer", dataset_checksum(record), id(ties), dataset_checksum(reference),
               bridge_rate)
        return self._once(key, lambda: self.inner.transfer(record, ties, reference,
                                                           bridge_rate))


def _one_pair(pair, spec, sources, seed):
    """Estimate one pair; a bad pair is reported, not raised (a survey goes on)."""
    try:
        settings = spec.model_dump(include=set(LagSettings.model_fields))
        result = estimate_lag({**settings, "a": pair.a.model_dump(), "b": pair.b.model_dump(),
                               "seed": seed}, sources=sources)
    except InputError as exc:
        return SurveyPair(label=pair.label, error=str(exc)), None
    clear = all(getattr(m, "clear_transition", True) for m in (result.a, result.b))
    return SurveyPair(label=pair.label, lag=result.lag, a_age=result.a.age, b_age=result.b.age,
                      verdict=result.verdict, clear=clear, a=compact_marker(result.a),
                      b=compact_marker(result.b)), pair_draws(result)


def pair_draws(result):
    """A lag's draws split into its own part and the terms other pairs may share:
    ``(own, [(key, scale), ...])``; the lag is ``own + sum(scale * z_key)``."""
    own = result.draws - sum(scale * z for _, scale, z in result.shared)
    return np.asarray(own), [(key, float(scale)) for key, scale, _ in result.shared]


def survey(spec, *, scheduler=None, progress=None, sources=None, age_reference=None,
           workers=None):
    """Lags of many marker pairs and their combination.

    Parameters
    ----------
    spec : SurveySpec, dict or path of a JSON file
        Pairs, or an event table with marker templates (see :class:`align.schema.SurveySpec`).
    scheduler : str, optional
        Address of a ``dask.distributed`` scheduler (its client is kept and reused by later
        surveys); default: worker processes on this machine.
    progress : align.progress.Progress, optional
        Reports finished pairs with an estimate of the time left.
    sources : align.lag.Sources, optional
        Where records and ties come from (default: paths beside the spec file).
    age_reference : {"b2k", "BP"}, optional
        Reference of the windows and results; overrides the spec's.
    workers : int, optional
        Worker processes on this machine (default: one per core, at most one per pair;
        ``1``: in this process, as inside a daemon process such as a service worker).

    Returns
    -------
    SurveyResult
        Per-pair lags (or why a pair has none), the combined lag (yr), Cochran's Q with the
        DerSimonian-Laird between-pair variance, and the verdict on a systematic lead.

    Notes
    -----
    Each pair has its own seed, spawned from the survey's, so the result does not depend on
    the scheduler, the number of workers or the order in which pairs finish. BLAS libraries
    are held to one thread per process while pairs run: their products are small, and with a
    process per core more threads only compete for the same cores.
    """
    spec = survey_spec(spec)
    if age_reference is not None:
        spec = validate_as(SurveySpec, {**spec.model_dump(), "age_reference": age_reference})
    seed = resolve_seed(spec.seed)
    sources = sources or Sources()
    pairs = spec.pairs or table_pairs(spec, sources)
    seeds = [int(s.generate_state(1)[0]) for s in np.random.SeedSequence(seed).spawn(len(pairs))]
    outcomes = _run(pairs, spec, sources, seeds, scheduler, progress, workers)
    rows = [row for row, _ in outcomes]
    draws = [(row, d) for row, d in outcomes if d is not None and row.clear]
    combined, prediction, heterogeneity, statement = combine(draws,
                                                             np.random.default_rng(seed))
    return SurveyResult(
        pairs=rows, combined=combined, prediction95=prediction, heterogeneity=heterogeneity,
        systematic=statement,
        n_used=len(draws), age_reference=spec.age_reference,
        assumptions=["Only pairs whose markers both show a clear transition (or a found event) "
                     "enter the combination.",
                     "Pairs that use one record share its absolute timescale error, and pairs "
                     "that use one tie table share its tie-point errors: each is drawn once "
                     "per Monte Carlo member for all of them. Between-tie (bridge) errors, age "
                     "ensembles and errors within one core are drawn per pair.",
                     "The combined lag is an inverse-variance weighted mean with a "
                     "DerSimonian-Laird between-pair variance; each pair enters through its "
                     "full Monte Carlo lag distribution.", CAUTION],
        references=["dersimonian1986", "cochran1954", "viechtbauer2007", "higgins2009",
                    "mudelsee2000"],
        provenance=survey_provenance(spec, rows, sources, seed))


def survey_provenance(spec, rows, sources, seed):
    """The survey's provenance: every record its markers were found on (once, with the pairs'
    sides that use it), the tie table and the event table, each with its SHA-256; the spec's
    values as parameters."""
    from align.markers import kind_of

    found = {}
    for row in rows:
        for label, marker in (("a", row.a), ("b", row.b)):
            if marker is None:
                continue
            kind = kind_of(marker.kind)
            items = ([i.model_dump() for i in marker.provenance.inputs] if kind.on_record
                     else kind.inputs(marker, label))
            for item in items:
                found.setdefault((item["source"], item["sha256"]), (item, set()))[1].add(label)
    inputs = [{**item, "role": f"record {' and '.join(sorted(sides))}"}
              if item["role"] == "record" else item for item, sides in found.values()]
    for role, name in (("ties", spec.ties), ("event table", spec.table and spec.table.path)):
        if name:
            path = sources.path(name)
            inputs.append({"role": role, "source": str(path), "sha256": sha256_file(path),
                           "timescale": ""})
    return provenance(inputs=inputs, parameters=spec.model_dump(exclude={"seed"}), seed=seed)


def _run(pairs, spec, sources, seeds, scheduler, progress, workers):
    """Per pair (in order): ``(SurveyPair, draws or None)``."""
    workers = worker_count(workers, len(pairs))
    if progress is not None:
        progress.begin(len(pairs))
    if scheduler is not None:
        return _on_cluster(pairs, spec, sources, seeds, scheduler, progress)
    if workers == 1:
        with _one_blas_thread():
            local = SurveySources(sources)
            return [_counted(_one_pair(pair, spec, local, seed), progress)
                    for pair, seed in zip(pairs, seeds)]
    token = uuid.uuid4().hex
    body = spec.model_dump()  # plain data: marker specs are classes made at run time
    jobs = [_pool(workers).submit(_pair_in_worker, token, pair.model_dump(), body, sources,
                                  seed)
            for pair, seed in zip(pairs, seeds)]
    if progress is not None:
        for job in jobs:
            job.add_done_callback(lambda _: progress.step())
    return [job.result() for job in jobs]


def _counted(outcome, progress):
    if progress is not None:
        progress.step()
    return outcome


def worker_count(workers, pairs):
    """Worker processes for ``pairs`` pairs: ``workers``, or one per core; one inside a daemon
    process (which may not start processes) or for a single pair."""
    if workers is not None and int(workers) < 1:
        raise InputError("workers must be at least 1", field="workers")
    if multiprocessing.current_process().daemon:
        return 1
    return max(1, min(int(workers or os.cpu_count() or 1), pairs))


def _one_blas_thread():
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


#: A worker process keeps the sources of the survey (token) it last served.
_WORKER = {}


@lru_cache(maxsize=2)
def _pool(workers):
    """Worker processes kept for later surveys: started from a server process that has
    imported corealign once (no per-worker import of numba and xarray, no fork of this
    process's threads)."""
    from concurrent.futures import ProcessPoolExecutor

    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(["align.survey", "align.lag", "align._kernels"])
    return ProcessPoolExecutor(max_workers=workers, mp_context=context,
                               initializer=_start_worker)


def _start_worker():
    """One thread per worker process for BLAS and for the compiled kernels' pool."""
    import align._threads

    align._threads.THREADS = 1
    _WORKER["blas"] = _one_blas_thread()


def _pair_in_worker(token, pair, spec, sources, seed):
    pair, spec = validate_as(PairSpec, pair), validate_as(SurveySpec, spec)
    if _WORKER.get("token") != token:
        _WORKER.update(token=token, sources=SurveySources(sources))
    return _one_pair(pair, spec, _WORKER["sources"], seed)


@lru_cache(maxsize=4)
def cluster_client(address):
    """The ``dask.distributed`` client of a scheduler, connected once and reused."""
    from distributed import Client

    return Client(address, set_as_default=False)


def _on_cluster(pairs, spec, sources, seeds, address, progress):
    import dask

    client = cluster_client(address)
    token = uuid.uuid4().hex
    body = spec.model_dump()
    tasks = [dask.delayed(_pair_in_worker, pure=True)(token, pair.model_dump(), body, sources,
                                                      s)
             for pair, s in zip(pairs, seeds)]
    return [_counted(outcome, progress)
            for outcome in client.gather(client.compute(tasks))]


def combine(draws, rng, samples=20_000):
    """Random-effects Monte Carlo combination of the pairs' lag distributions.

    Parameters
    ----------
    draws : list of (SurveyPair, (own, shared))
        Each pair's row and its draws split by :func:`pair_draws`.
    rng : numpy.random.Generator
    samples : int
        Monte Carlo members of the combination.

    Returns
    -------
    combined : LagSummary or None
        The combined lag (yr).
    prediction : [lo, hi] or None
        95 % prediction interval of a new pair's lag (yr).
    heterogeneity : Heterogeneity or None
    statement : str
        The headline: heterogeneity first when significant, then the verdict.
    """
    if not draws:
        return None, None, None, "no pair gave a lag"
    members = _joint_members(draws, rng, samples)
    if len(draws) < 2:
        return lag_summary(members[0]), None, None, "one pair only: no combination"
    rows = [row for row, _ in draws]
    medians = np.array([row.lag.median for row in rows])
    var = np.array([row.lag.sd ** 2 for row in rows])
    k = len(rows)
    cov = np.diag(var)
    tau2, q = float(dl_tau2(medians, cov)), float(chi2_statistic(medians, cov))
    weights = 1.0 / (var + tau2)
    combined = (weights[:, None] * (members + rng.normal(0.0, np.sqrt(tau2), members.shape))
                ).sum(axis=0) / weights.sum()
    summary = lag_summary(combined)
    prediction = het.prediction_interval(summary.median, summary.sd, tau2, k)
    p_value = float(chi2.sf(q, k - 1))
    shares = het.q_shares(medians, var)
    order = np.argsort(shares)[::-1][:LARGEST_SHARES]
    heterogeneity = Heterogeneity(
        q=q, dof=k - 1, p_value=p_value, tau2=tau2, significant=p_value < HETEROGENEITY_LEVEL,
        tau=float(np.sqrt(tau2)),
        tau_ci95=_spread_ci95(q_profile(medians, cov)),
        largest=[QShare(label=rows[i].label, share=float(shares[i])) for i in order])
    return summary, prediction, heterogeneity, _headline(summary, prediction, heterogeneity)


def _spread_ci95(tau2_bounds):
    """The between-pair sd's 95 % interval (yr) from the Q-profile bounds of its variance;
    None when the interval is empty (Q below its 2.5 % point: both bounds 0)."""
    return [float(np.sqrt(b)) for b in tau2_bounds] if tau2_bounds[1] > 0 else None


def _joint_members(draws, rng, samples):
    """Monte Carlo members of every pair's lag (pair x member): each pair's own draws
    resampled, plus one standard normal per shared key, common to the pairs that carry it."""
    shared = {}
    members = []
    for _, (own, terms) in draws:
        lag = own[rng.integers(0, own.size, samples)]
        for key, scale in terms:
            if key not in shared:
                shared[key] = rng.standard_normal(samples)
            lag = lag + scale * shared[key]
        members.append(lag)
    return np.stack(members)


def _headline(summary, prediction, heterogeneity):
    lo, hi = summary.ci95
    numbers = (f"combined lag {summary.median:.1f} years (95 %: {lo:.1f} to {hi:.1f}), "
               f"P(a first) = {summary.p_a_before_b:.3f}")
    if lo > 0:
        statement = f"a systematically precedes b: {numbers}"
    elif hi < 0:
        statement = f"a systematically follows b: {numbers}"
    else:
        statement = f"no systematic lead: {numbers}"
    if prediction is not None:
        statement += (f"; a new pair's lag would lie within {prediction[0]:.1f} to "
                      f"{prediction[1]:.1f} years (95 % prediction interval)")
    h = heterogeneity
    if not h.significant:
        return statement
    largest = ", ".join(f"{s.label} ({100 * s.share:.0f} %)" for s in h.largest)
    return (f"the pairs disagree more than their uncertainties allow (Q = {h.q:.1f} on "
            f"{h.dof} dof, p = {h.p_value:.2g}): between-pair sd {h.tau:.1f} years (95 %: "
            f"{h.tau_ci95[0]:.1f} to {h.tau_ci95[1]:.1f}); largest contributions to Q: "
            f"{largest}. Read the combination with that in mind: {statement}")
