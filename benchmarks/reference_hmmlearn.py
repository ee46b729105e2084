"""The hmmlearn reference for the benchmarks: what a user of a discrete-time HMM library would do.

Run in a fresh process by ``run_all.py``; prints one JSON line with the timed seconds and the
process's peak resident memory (``resource.getrusage(RUSAGE_SELF).ru_maxrss``).

``score`` mode
    The equal-gap caseload (``generate.py --layout equal``) as joint symbols over the channels
    (symbol probability = product of the per-channel probabilities, channels independent given the
    stage, nothing missing). hmmlearn has no covariates, so the cases are grouped by covariate
    pattern and each group gets its own ``CategoricalHMM`` with ``startprob_ = initial``,
    ``transmat_ = expm(Q(x) * 30)`` and that emission table. Timed: ``model.score(X, lengths)`` and
    ``model.predict_proba(X, lengths)`` on each group's concatenated sequences (model set-up excluded).
    Also saves the posterior at each case's last contact (for a cross-check of caseview's output).

``fit`` mode
    EM (Baum-Welch) from the given starting model: ``CategoricalHMM(n_components=S, n_features=F,
    init_params="", params="ste", n_iter=100, tol=1e-4, random_state=0)`` with ``startprob_``,
    ``transmat_ = expm(Q_start * 30)`` and the joint emission table of the starting model. hmmlearn
    estimates a free transition matrix (S*(S-1) numbers) and a free joint emission table
    (S*(F-1) numbers), more than caseview's continuous-time model with independent channels.
    Timed: ``model.fit(X, lengths)``.
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def joint_emission_table(model) -> np.ndarray:
    """Emission probabilities of joint symbols, shape (n_stages, prod(n_categories)).

    Symbol code is mixed radix with the first channel most significant (as in generate.py).
    """
    table = np.ones((model.n_stages, 1))
    for probabilities in model.emission_matrices():
        table = (table[:, :, None] * probabilities[:, None, :]).reshape(model.n_stages, -1)
    return table


def hmmlearn_model(model, covariates, gap: float, **options):
    from hmmlearn.hmm import CategoricalHMM
    from scipy.linalg import expm

    emission = joint_emission_table(model)
    hmm = CategoricalHMM(n_components=model.n_stages, n_features=emission.shape[1], **options)
    hmm.startprob_ = np.asarray(model.initial, dtype=float)
    transmat = expm(model.generator(covariates) * gap)
    transmat = np.clip(transmat, 0.0, None)
    hmm.transmat_ = transmat / transmat.sum(axis=1, keepdims=True)
    hmm.emissionprob_ = emission
    return hmm


def run_score(model, arrays) -> dict:
    symbols, lengths = arrays["symbols"], arrays["lengths"]
    case_covariates, gap = arrays["case_covariates"], float(arrays["gap"])
    offsets = np.concatenate([[0], np.cumsum(lengths)])
    if case_covariates.shape[1]:
        patterns, group = np.unique(case_covariates, axis=0, return_inverse=True)
        group = group.reshape(-1)
    else:
        patterns, group = np.zeros((1, 0)), np.zeros(lengths.size, dtype=np.int64)
    prepared = []
    for g, pattern in enumerate(patterns):
        cases = np.flatnonzero(group == g)
        counts = lengths[cases]
        rows = np.repeat(offsets[cases] - np.concatenate([[0], np.cumsum(counts)[:-1]]), counts) + \
            np.arange(counts.sum())
        prepared.append((cases, rows, symbols[rows].reshape(-1, 1), lengths[cases], hmmlearn_model(model, pattern, gap)))
    last_posterior = np.zeros((lengths.size, model.n_stages))
    total_log_likelihood = 0.0
    start, cpu_start = time.perf_counter(), time.process_time()
    for cases, rows, X, group_lengths, hmm in prepared:
        total_log_likelihood += hmm.score(X, group_lengths)
        posterior = hmm.predict_proba(X, group_lengths)
        last_posterior[cases] = posterior[np.cumsum(group_lengths) - 1]
    seconds, cpu_seconds = time.perf_counter() - start, time.process_time() - cpu_start
    return {"seconds": seconds, "cpu_seconds": cpu_seconds, "log_likelihood": float(total_log_likelihood),
            "groups": int(len(patterns)),
            "last_posterior": last_posterior}


def run_fit(model, arrays, n_iter: int, tol: float) -> dict:
    symbols, lengths = arrays["symbols"], arrays["lengths"]
    if arrays["case_covariates"].shape[1]:
        raise SystemExit("fit mode needs a caseload without covariates (generate.py --covariates zero)")
    hmm = hmmlearn_model(model, np.zeros(0), float(arrays["gap"]), init_params="", params="ste",
                         n_iter=n_iter, tol=tol, random_state=0)
    X = symbols.reshape(-1, 1)
    start, cpu_start = time.perf_counter(), time.process_time()
    hmm.fit(X, lengths)
    seconds, cpu_seconds = time.perf_counter() - start, time.process_time() - cpu_start
    history = list(hmm.monitor_.history)
    return {"seconds": seconds, "cpu_seconds": cpu_seconds, "iterations": int(hmm.monitor_.iter),
            "converged": bool(hmm.monitor_.converged),
            "log_likelihood": float(history[-1]) if history else None}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("mode", choices=("score", "fit"))
    parser.add_argument("--arrays", type=Path, required=True, help=".npz written by generate.py --layout equal")
    parser.add_argument("--model", type=Path, required=True, help="model JSON (the truth for score, the start for fit)")
    parser.add_argument("--n-iter", type=int, default=100)
    parser.add_argument("--tol", type=float, default=1e-4)
    parser.add_argument("--posterior-out", type=Path, help="score mode: save last-contact posteriors (.npy)")
    args = parser.parse_args(argv)

    from caseview.modelfile import load_model

    model = load_model(args.model)
    arrays = dict(np.load(args.arrays))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if args.mode == "score":
            result = run_score(model, arrays)
            posterior = result.pop("last_posterior")
            if args.posterior_out:
                np.save(args.posterior_out, posterior)
        else:
            result = run_fit(model, arrays, args.n_iter, args.tol)
    result["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    result["cases"] = int(arrays["lengths"].size)
    result["contacts"] = int(arrays["lengths"].sum())
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
