"""Samplers of a campaign: a batched NSGA-II and the factory for every ``[search] sampler``.
"""

from __future__ import annotations

import warnings
import optuna
from optuna.distributions import BaseDistribution
from optuna.samplers import NSGAIISampler
from optuna.trial import FrozenTrial, TrialState
from tunnelsmith.optimize.errors import InputError


class BatchNSGAIISampler(NSGAIISampler):
    """NSGA-II (Deb et al., IEEE Trans. Evol. Comput. 6, 182, 2002) for batched asks.

    Same algorithm as :class:`optuna.samplers.NSGAIISampler`; three costs that grow with
    the history are removed:

    * the search space is the campaign's fixed space (no intersection over all trials);
    * the generation of new trials is computed once per batch (:meth:`start_batch`)
      from an incremental count of completed trials per generation;
    * completed trials are indexed by generation as they complete, and parent
      populations, fixed once chosen, are remembered per generation.
    """

    def __init__(self, search_space: dict[str, BaseDistribution], **kwargs) -> None:
        super().__init__(**kwargs)
        # Sorted by name, as Optuna's intersection search space is: same draws, same designs.
        self._fixed_space = {name: d for name, d in sorted(search_space.items()) if not d.single()}
        self._members: dict[int, list[FrozenTrial]] = {}
        self._cursor = 0
        self._unfinished: list[int] = []
        self._batch_generation: int | None = None
        self._parents: dict[int, list[FrozenTrial]] = {}

    def start_batch(self) -> None:
        """Forget the generation decided for the previous batch."""
        self._batch_generation = None

    def infer_relative_search_space(self, study, trial) -> dict[str, BaseDistribution]:
        return dict(self._fixed_space)

    def _count_completed(self, study) -> None:
        key = self._get_generation_key()
        trials = study._get_trials(deepcopy=False, use_cache=True)
        still = []
        for index in self._unfinished + list(range(self._cursor, len(trials))):
            trial = trials[index]
            if not trial.state.is_finished():
                still.append(index)
            elif trial.state == TrialState.COMPLETE:
                # A completed trial never changes again: safe to keep.
                self._members.setdefault(trial.system_attrs.get(key, -1), []).append(trial)
        self._unfinished, self._cursor = still, len(trials)

    def get_trial_generation(self, study, trial: FrozenTrial) -> int:
        generation = trial.system_attrs.get(self._get_generation_key(), None)
        if generation is not None:
            return generation
        if self._batch_generation is None:
            self._count_completed(study)
            newest = max((g for g in self._members if g >= 0), default=0)
            full = len(self._members.get(newest, ())) >= self._population_size
            self._batch_generation = newest + 1 if full else newest
        study._storage.set_trial_system_attr(trial._trial_id, self._get_generation_key(), self._batch_generation)
        return self._batch_generation

    def get_population(self, study, generation: int) -> list[FrozenTrial]:
        self._count_completed(study)
        return list(self._members.get(generation, ()))

    def get_parent_population(self, study, generation: int) -> list[FrozenTrial]:
        if generation in self._parents:
            return self._parents[generation]
        parents = super().get_parent_population(study, generation)
        # Optuna returns a cached parent population in trial order: so does the memo.
        self._parents[generation] = sorted(parents, key=lambda t: t.number)
        return parents


def make_sampler(name: str, *, seed: int | None, search_space: dict[str, BaseDistribution], batch: int,
                 shared_seed: int | None = None, spec_path: str = "campaign"):
    """The Optuna sampler named in ``[search] sampler``.

    ``seed`` seeds this worker's sampler; ``shared_seed`` (equal in every worker) seeds
    the QMC sequence, which workers share by index.
    """
    samplers = optuna.samplers
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if name == "nsga2":
            return BatchNSGAIISampler(search_space, population_size=max(batch, 50), seed=seed)
        if name == "tpe":
            return samplers.TPESampler(seed=seed, constant_liar=True)
        if name == "random":
            return samplers.RandomSampler(seed=seed)
        if name == "qmc":
            return samplers.QMCSampler(qmc_type="sobol", scramble=True, seed=shared_seed,
                                       independent_sampler=samplers.RandomSampler(seed=seed),
                                       warn_independent_sampling=False, warn_asynchronous_seeding=False)
        if name == "gp":
            import importlib.util

            if importlib.util.find_spec("torch") is None:
                raise InputError(spec_path, "search.sampler",
                                 'the "gp" sampler needs PyTorch, which is not installed',
                                 "pip install tunnelsmith[gp], or choose another sampler "
                                 '(sampler = "nsga2", "tpe", "random" or "qmc")')
            return samplers.GPSampler(seed=seed, warn_independent_sampling=False)
    raise InputError(spec_path, "search.sampler", f"unknown sampler {name!r}",
                     'choose one of "nsga2", "tpe", "gp", "random", "qmc"')
