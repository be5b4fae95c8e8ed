"""Progress reports of density-of-states builds (thermo.dos.build.build(progress=...)), their
way through the cache and the estimators, and the tempering run in pieces that they need.

What is checked: the calls are monotone, bounded in number and end with done == total; the
total is the number of sweeps the sampler was actually asked for; a cache hit calls nothing;
and reporting changes no sample (the chain in pieces draws the same random numbers as in one
piece)."""

import itertools

import numpy as np
import pytest

from thermo import sampler
from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.dos import build as dos_build
from thermo.dos import cache as dos_cache
from thermo.dos.build import PROGRESS_REPORTS, DosSettings, build
from thermo.errors import SamplerError
from thermo.estimate import estimate_ensemble, estimate_single

# progress is what is tested here, not physics: a cheap 2+2 build is enough
N_PLUS, N_MINUS, CORE = 2, 2, 0.01
SETTINGS = DosSettings(n_temps=6, n_sweeps=300, n_boot=4)


class Calls(list):
    """A ``progress(done, total)`` that records its calls."""

    def __call__(self, done, total):
        self.append((done, total))


def assert_well_formed(calls, max_calls, starts_at_zero=True):
    assert 1 <= len(calls) <= max_calls
    if starts_at_zero:
        assert calls[0][0] == 0                               # the bar opens at the start
    totals = {t for _, t in calls}
    assert len(totals) == 1                                   # one total for the whole build
    done = [d for d, _ in calls]
    assert all(a <= b for a, b in itertools.pairwise(done))    # monotone
    assert calls[-1][0] == calls[-1][1]                       # ends full
    assert all(d < calls[-1][1] for d in done[:-1])           # ... only at the end


def test_tempering_in_pieces_draws_the_same_chain(rng):
    # the samples with progress reports equal those without, to the last bit, for a thinned
    # run whose burn-in ends inside a piece (101 is no multiple of the piece length)
    for domain in (Disk(), Box()):
        kw = {"burn_in": 101, "thin": 3, "position_stride": 2}
        seed = int(rng.integers(2**31))
        one = sampler.run_tempering(domain, 3, 2, [1.0, 0.0, -0.6], 400, CORE,
                                    np.random.default_rng(seed), **kw)
        calls = Calls()
        pieces = sampler.run_tempering(domain, 3, 2, [1.0, 0.0, -0.6], 400, CORE,
                                       np.random.default_rng(seed), progress=calls,
                                       n_reports=7, **kw)
        for name in ("energies", "positions", "step_sizes", "acceptance", "swap_acceptance"):
            np.testing.assert_array_equal(getattr(one, name), getattr(pieces, name), name)
        # 101 + (400 // 3) * 3 = 500 sweeps in all (run_tempering's docstring: S = n // thin)
        assert calls[-1] == (500, 500) and len(calls) == 7
        assert_well_formed(calls, 7, starts_at_zero=False)


def test_tempering_refuses_a_bad_number_of_reports():
    with pytest.raises(SamplerError, match="n_reports = 0"):
        sampler.run_tempering(Disk(), 2, 2, [0.0], 50, CORE, np.random.default_rng(0),
                              progress=Calls(), n_reports=0)


def test_a_build_reports_every_sweep_it_runs_and_is_unchanged_by_it(monkeypatch):
    asked = []
    real = sampler.run_tempering

    def spy(domain, n_plus, n_minus, betas, n_sweeps, core, rng, burn_in=None, thin=1,
            **kw):
        asked.append(burn_in + (n_sweeps // thin) * thin)   # the sweeps the chain runs
        return real(domain, n_plus, n_minus, betas, n_sweeps, core, rng, burn_in=burn_in,
                    thin=thin, **kw)

    monkeypatch.setattr(sampler, "run_tempering", spy)
    calls = Calls()
    with_bar = build(N_PLUS, N_MINUS, Disk(), CORE, SETTINGS, np.random.default_rng(4),
                     progress=calls)
    assert len(asked) == 2                       # the pilot run of the ladder, then the run
    assert_well_formed(calls, 2 * PROGRESS_REPORTS + 2)
    assert calls[-1][1] == sum(asked)
    without = build(N_PLUS, N_MINUS, Disk(), CORE, SETTINGS, np.random.default_rng(4))
    np.testing.assert_array_equal(with_bar.energies, without.energies)
    np.testing.assert_array_equal(with_bar.f, without.f)


def test_a_build_on_a_given_ladder_has_no_pilot_run():
    calls = Calls()
    settings = DosSettings(n_sweeps=200, n_boot=3, betas=(0.5, 0.0, -0.5))
    build(N_PLUS, N_MINUS, Disk(), CORE, settings, np.random.default_rng(1), progress=calls)
    assert_well_formed(calls, PROGRESS_REPORTS + 2)
    kw = dos_build._run_options(N_PLUS, N_MINUS, settings)
    assert calls[-1][1] == kw["burn_in"] + (200 // kw["thin"]) * kw["thin"]


def test_the_cache_builds_once_and_a_hit_reports_nothing(tmp_path):
    first, second = Calls(), Calls()
    dos_cache.load_or_build(N_PLUS, N_MINUS, Disk(), CORE, cache_dir=tmp_path,
                            settings=SETTINGS, progress=first)
    assert_well_formed(first, 2 * PROGRESS_REPORTS + 2)
    dos_cache._LOADED.clear()                    # a new process: read from the file
    dos_cache.load_or_build(N_PLUS, N_MINUS, Disk(), CORE, cache_dir=tmp_path,
                            settings=SETTINGS, progress=second)
    assert second == []


def _builds(calls):
    """Split the calls of several builds at each full report."""
    out, current = [], []
    for call in calls:
        current.append(call)
        if call[0] == call[1]:
            out.append(current)
            current = []
    assert current == []                         # every build ended full
    return out


@pytest.mark.parametrize("estimate", ["single", "ensemble"])
def test_the_estimators_pass_progress_to_their_builds(tmp_path, estimate):
    pos = np.array([[0.3, 0.1], [-0.2, 0.4], [0.1, -0.5], [-0.4, -0.3]])
    signs = np.array([1, 1, -1, -1])
    # each reach of the ladder is its own cache entry (thermo.dos.cache: exact settings)
    settings = DosSettings(n_sweeps=300, n_boot=4)

    def run(calls):
        if estimate == "single":
            return estimate_single(pos, signs, Disk(), CORE, cache_dir=tmp_path,
                                   settings=settings, progress=calls)
        return estimate_ensemble([(pos, signs)] * 3, Disk(), CORE, cache_dir=tmp_path,
                                 settings=settings, progress=calls)

    first, again = Calls(), Calls()
    run(first)
    builds = _builds(first)
    assert builds                                # a cold cache: at least one build
    for calls in builds:                         # (a wider ladder is a build of its own)
        assert_well_formed(calls, 2 * PROGRESS_REPORTS + 2)
    run(again)
    assert again == []                           # the same estimate again: all cached
