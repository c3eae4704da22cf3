"""The Bayes bound: the best any forecast from the measurements can do on the simulated line.

    .venv/bin/python benchmarks/calibration_bayes.py                 # seed 2026, 1-1.5 min
    .venv/bin/python benchmarks/calibration_bayes.py --seed 7 --save /tmp/p7.npz
    .venv/bin/python benchmarks/calibration_bayes.py --drift-share 0.15 --growth-share 0.25
    .venv/bin/python benchmarks/calibration_bayes.py --compare       # + core and oracle, 2-3 min
    .venv/bin/python benchmarks/calibration_bayes.py --samples 4000 --grid-scale 0.5  # checks

(times on a shared 2-core machine; run from the repository root with the package importable.)

What it computes: for every scored panel and layer k, the exact posterior predictive
P(final worst FTB > limit | observed terms of layers 1..k) under the line's *true* generative
model (``line_sim.Line.new_lot``). The observations are those of ``line_core.run_core``: the true
terms plus Gaussian fit noise of sd ``line_core._fit_sd`` per term, drawn from
``np.random.default_rng(7)`` in lot order, so the panels and their observed terms are the same
as run_core's. A forecast from the same measurements cannot have a lower expected Brier score
(the Brier score is proper), so these scores are the achievable ones; the oracle of
``calibration_oracle.py`` knows each panel's latent parameters and is out of reach. "In
expectation": on 400 panels the paired Brier gap of another forecast to the bound has a
standard error of about 0.002-0.004, so on one seed another forecast can score a little better
by chance; ``--compare`` prints that gap from the outcomes and, without the outcomes' noise, as
mean (q - p)^2, which is what it is in expectation if p is the exact posterior.

Assumed known (this makes the bound optimistic, which is right for a bound): every LineConfig
figure (scatter, offset, walk, drift and growth shares and ranges), every exposure tool's bias,
tool 0's translation drift with the time step, and which tool exposes each remaining layer.
Unknown and integrated out: each panel's offset, random walk, layer scatter (past: through
the fit noise; future: fresh), whether and how it drifts (side, angle, size) and grows (g).

How, per panel and layer k (Rasmussen and Williams, *Gaussian Processes for Machine Learning*,
eq. A.6 for the Gaussian conditional):

- Given the non-Gaussian latents everything is linear-Gaussian and the terms separate. Per side
  and translation axis the layers are x_l = offset + walk_l + scatter_l (+ drift), jointly
  Gaussian with cov o^2 + w^2 min(l, m) + e^2 [l = m]; the final FTB's Tx, Ty are the sums over
  layers of side A less side B, conditioned exactly on the observed y_l = x_l + noise. Scale
  terms are independent per layer (plus g * l on side A's Sx and Sy if growing); rotation is
  one value per layer seen twice (Ox and Oy, each with its own fit noise).
- Drift (none, or side A or B with a vector on the ring [drift_um] at a uniform angle) and
  growth (none, or g uniform in growth_ppm) have Gaussian likelihoods in the drift vector and in
  g, so they are integrated on a grid: 72 angles x 21 sizes per side and 25 values of g by
  default, cell midpoints, prior weight uniform per cell (``--grid-scale`` halves or doubles it).
  Drift touches only Tx, Ty and growth only Sx, Sy, so their posteriors are independent.
- P(fail) by Monte Carlo from the mixture: grid cells drawn by posterior weight, then the
  Gaussian; the worst vector length at the product's check points, exactly as
  ``calibration_oracle.oracle_p`` evaluates them. The Monte Carlo error is printed.

The figures printed are those of ``calibration_core.py`` for the same scored panels (sum p /
failures, Brier and skill against the base rate per Wilks, *Statistical Methods in the
Atmospheric Sciences*, ch. 8, through ``calibration_scores``), the P-only sweep, hysteresis
flags at several enter/leave pairs, and the z of the final Sx after layer 3 for the growing
panels from the exact mixture mean and sd. ``--compare`` runs ``line_core.run_core`` and
``calibration_oracle.oracle_p`` on the same line and prints the same figures for all three.
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from calibration_oracle import flags, oracle_p
from calibration_scores import layer_score, panel_scores, print_sweep, z_scores
from line_core import _fit_sd, run_core
from line_sim import PPM, Line, LineConfig, Lot, add_line_options, line_config

from app.overlay.model import design_matrix

CHECK_LAYERS = (3, 6, 9)
FLAG_PAIRS = ((0.20, 0.10), (0.30, 0.15), (0.40, 0.20), (0.50, 0.25), (0.50, 0.30))
GRID = (72, 21, 25)  # drift angles, drift sizes (per side), values of g


def observed_lots(line: Line, n_lots: int) -> list[tuple[Lot, np.ndarray]]:
    """The lots of ``run_core`` with their observed terms (true + fit noise), in the same order
    and from the same random streams (line.rng for the lots, default_rng(7) for the noise)."""
    fit_sd = _fit_sd(line)
    rng = np.random.default_rng(7)
    out = []
    for step in range(n_lots):
        lot = line.new_lot(f"C{step:03d}", step, prefix="K")
        noisy = lot.terms + rng.normal(0.0, 1.0, lot.terms.shape) * fit_sd
        out.append((lot, noisy))
    return out


def tool_array(line: Line, lot: Lot) -> np.ndarray:
    """The exposure tools' terms of every layer of the lot, panel frame, shape (2, layers, 8)."""
    c = line.config
    out = np.zeros((2, c.layers, 8))
    for layer in range(c.layers):
        for s, side in enumerate(("A", "B")):
            out[s, layer] = line.tool_terms(int(lot.tools[layer, s]), side, lot.start_step + layer)
    return out


@dataclass(frozen=True)
class TranslationBlock:
    """Gaussian conditioning of one translation axis of one side after k layers (no drift).

    y = x_1..k + noise with x_l = offset + walk_l + scatter_l; S = sum over all layers of x_l.
    E[S | y] = gain @ y, Var[S | y] = var; with a drift d on the side, y - d and S + L d, so the
    mean gains shift * d (shift = L - gain @ 1). The drift's log-likelihood ratio against none is
    d * (ones_p @ y) - d^2 / 2 * q with ones_p = Syy^-1 1, q = 1 Syy^-1 1.
    """

    gain: np.ndarray
    var: float
    shift: float
    ones_p: np.ndarray
    q: float


def layer_cov(c: LineConfig) -> np.ndarray:
    """Prior covariance of one side's translation on one axis over all layers (no drift)."""
    idx = np.arange(1, c.layers + 1)
    return (
        c.offset_um**2
        + c.walk_um**2 * np.minimum.outer(idx, idx)
        + c.layer_translation_um**2 * np.eye(c.layers)
    )


def translation_block(c: LineConfig, noise_sd: float, k: int) -> TranslationBlock:
    cov = layer_cov(c)
    big_l = c.layers
    syy = cov[:k, :k] + noise_sd**2 * np.eye(k)
    sys_ = cov[:k].sum(axis=1)  # Cov(y_l, S) for l <= k
    vss = float(cov.sum())
    gain = np.linalg.solve(syy, sys_)
    ones_p = np.linalg.solve(syy, np.ones(k))
    return TranslationBlock(
        gain=gain,
        var=vss - float(sys_ @ gain),
        shift=big_l - float(gain.sum()),
        ones_p=ones_p,
        q=float(ones_p.sum()),
    )


@dataclass(frozen=True)
class Posterior:
    """Posterior predictive of the final FTB terms of n panels after layer k: a mixture.

    F = base + drift_shift[cell_d] on (Tx, Ty) + growth_shift[cell_g] on (Sx, Sy) + Gaussian
    with independent sd ``sd`` on Tx, Ty, Sx, Sy and one rotation draw R (sd ``sd_r``) added to
    both Ox and Oy. ``drift_logw`` (n, cells) and ``growth_logw`` (n, cells) are normalised log
    posterior weights; cell 0 is "no drift" / "no growth".
    """

    base: np.ndarray  # (n, 8)
    sd: np.ndarray  # (4,) Tx, Ty, Sx, Sy
    sd_r: float
    drift_logw: np.ndarray  # (n, 1 + 2 * angles * sizes)
    drift_shift: np.ndarray  # (cells, 2)
    growth_logw: np.ndarray  # (n, 1 + gs)
    growth_shift: np.ndarray  # (cells, 2)

    def quiet_cov(self) -> np.ndarray:
        """Covariance of the Gaussian part (given the latent cells), 8 x 8."""
        cov = np.zeros((8, 8))
        cov[[0, 1, 2, 3], [0, 1, 2, 3]] = self.sd**2
        cov[4:6, 4:6] = self.sd_r**2
        return cov

    def term_moments(self, term: int) -> tuple[np.ndarray, np.ndarray]:
        """Exact mixture mean and sd of one final term (Tx, Ty, Sx or Sy), per panel."""
        if term in (0, 1):
            logw, shift, var = self.drift_logw, self.drift_shift[:, term], self.sd[term] ** 2
        elif term in (2, 3):
            logw, shift, var = self.growth_logw, self.growth_shift[:, term - 2], self.sd[term] ** 2
        else:
            raise ValueError("term must be 0..3")
        w = np.exp(logw)
        m1 = w @ shift
        m2 = w @ shift**2
        return self.base[:, term] + m1, np.sqrt(var + m2 - m1**2)


def _normalise(logw: np.ndarray) -> np.ndarray:
    top = logw.max(axis=1, keepdims=True)
    out: np.ndarray = logw - top - np.log(np.exp(logw - top).sum(axis=1, keepdims=True))
    return out


def _log(x: float) -> float:
    return float(np.log(x)) if x > 0 else -np.inf


def grid_cells(c: LineConfig, grid: tuple[int, int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Drift vectors (angles * sizes, 2) and values of g (gs,), cell midpoints."""
    na, ns, ng = grid
    angle = (np.arange(na) + 0.5) * 2.0 * np.pi / na
    lo, hi = c.drift_um
    size = lo + (np.arange(ns) + 0.5) * (hi - lo) / ns
    a, s = np.meshgrid(angle, size, indexing="ij")
    vec = np.stack([(s * np.cos(a)).ravel(), (s * np.sin(a)).ravel()], axis=1)
    glo, ghi = c.growth_ppm
    g = (glo + (np.arange(ng) + 0.5) * (ghi - glo) / ng) * PPM
    return vec, g


def posterior(
    c: LineConfig,
    fit_sd: np.ndarray,
    residual: np.ndarray,
    tool_total: np.ndarray,
    k: int,
    grid: tuple[int, int, int] = GRID,
) -> Posterior:
    """Posterior predictive after layer k for panels with observed terms less the tools
    (``residual``, shape (n, 2, layers, 8), only layers 1..k read)."""
    big_l = c.layers
    n = residual.shape[0]
    y = residual[:, :, :k]
    base = np.zeros((n, 8))
    base[:] = tool_total
    sd = np.zeros(4)
    # Translation: exact conditioning per side and axis; drift log-likelihood per side.
    drift_vec, g_values = grid_cells(c, grid)
    cells = drift_vec.shape[0]
    ll_side = np.zeros((n, 2, cells))
    shift_t = np.zeros(2)
    for axis in (0, 1):
        blk = translation_block(c, float(fit_sd[axis]), k)
        base[:, axis] += y[:, 0, :, axis] @ blk.gain - y[:, 1, :, axis] @ blk.gain
        sd[axis] = np.sqrt(2.0 * blk.var)
        b = y[:, :, :, axis] @ blk.ones_p  # (n, 2)
        d = drift_vec[:, axis]
        ll_side += b[:, :, None] * d[None, None, :] - 0.5 * blk.q * d**2
        shift_t[axis] = blk.shift
    prior_cell = _log(c.drift_share / (2.0 * cells))
    drift_logw = np.concatenate(
        [
            np.full((n, 1), _log(1.0 - c.drift_share)),
            prior_cell + ll_side[:, 0],
            prior_cell + ll_side[:, 1],
        ],
        axis=1,
    )
    drift_shift = np.concatenate([np.zeros((1, 2)), drift_vec * shift_t, -drift_vec * shift_t])
    # Scale: independent per layer; side A's Sx, Sy grow by g * l on a growing panel.
    s_e = c.layer_scale_ppm * PPM
    lk = np.arange(1, k + 1, dtype=float)
    ll_g = np.zeros((n, g_values.size))
    growth_shift = np.zeros((1 + g_values.size, 2))
    for j in (0, 1):
        v = s_e**2 + fit_sd[2 + j] ** 2
        rho = s_e**2 / v
        base[:, 2 + j] += rho * (y[:, 0, :, 2 + j].sum(axis=1) - y[:, 1, :, 2 + j].sum(axis=1))
        sd[2 + j] = np.sqrt(2.0 * (k * s_e**2 * fit_sd[2 + j] ** 2 / v + (big_l - k) * s_e**2))
        h = y[:, 0, :, 2 + j] @ lk / v
        ll_g += h[:, None] * g_values[None, :] - 0.5 * (lk @ lk) / v * g_values**2
        growth_shift[1:, j] = g_values * (big_l * (big_l + 1) / 2 - rho * lk.sum())
    growth_logw = np.concatenate(
        [
            np.full((n, 1), _log(1.0 - c.growth_share)),
            _log(c.growth_share / g_values.size) + ll_g,
        ],
        axis=1,
    )
    # Rotation: one value a layer, seen in Ox and in Oy with their own fit noise.
    s_r = c.layer_rotation_urad * PPM
    prec = 1.0 / s_r**2 + 1.0 / fit_sd[4] ** 2 + 1.0 / fit_sd[5] ** 2
    post_var = 1.0 / prec
    mean_r = post_var * (y[..., 4] / fit_sd[4] ** 2 + y[..., 5] / fit_sd[5] ** 2)  # (n, 2, k)
    r = mean_r[:, 0].sum(axis=1) - mean_r[:, 1].sum(axis=1)
    base[:, 4] += r
    base[:, 5] += r
    sd_r = float(np.sqrt(2.0 * (k * post_var + (big_l - k) * s_r**2)))
    return Posterior(
        base=base,
        sd=sd,
        sd_r=sd_r,
        drift_logw=_normalise(drift_logw),
        drift_shift=drift_shift,
        growth_logw=_normalise(growth_logw),
        growth_shift=growth_shift,
    )


def _draw_cells(logw: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Cell index per panel and sample, drawn by weight (inverse cdf, all panels at once)."""
    n, m = logw.shape
    cdf = np.cumsum(np.exp(logw), axis=1)
    cdf /= cdf[:, -1:]
    offset = np.arange(n, dtype=float)[:, None]
    idx = np.searchsorted((cdf + offset).ravel(), (u + offset).ravel(), side="right")
    out: np.ndarray = np.minimum(idx.reshape(u.shape) - np.arange(n)[:, None] * m, m - 1)
    return out


def p_fail(
    post: Posterior, design: np.ndarray, limit: float, samples: int, rng: np.random.Generator
) -> np.ndarray:
    """Monte Carlo P(final worst FTB > limit) per panel; ``design`` is (8, 2 * points)."""
    n = post.base.shape[0]
    cd = _draw_cells(post.drift_logw, rng.random((n, samples)))
    cg = _draw_cells(post.growth_logw, rng.random((n, samples)))
    f = np.broadcast_to(post.base[:, None, :], (n, samples, 8)).copy()
    f[..., 0:2] += post.drift_shift[cd]
    f[..., 2:4] += post.growth_shift[cg]
    f[..., 0:4] += rng.standard_normal((n, samples, 4)) * post.sd
    r = rng.standard_normal((n, samples)) * post.sd_r
    f[..., 4] += r
    f[..., 5] += r
    values = f @ design
    p_count = design.shape[1] // 2
    worst = np.hypot(values[..., :p_count], values[..., p_count:]).max(axis=2)
    out: np.ndarray = (worst > limit).mean(axis=1)
    return out


@dataclass
class BayesRun:
    lots: list[Lot]
    p: np.ndarray  # (panels, layers)
    fails: np.ndarray  # (panels,)
    z_mean: np.ndarray  # final Sx mean after layer 3, per panel
    z_sd: np.ndarray
    truth_sx: np.ndarray
    growing: np.ndarray


def run_bayes(
    line: Line,
    *,
    warm_lots: int,
    lots: int,
    samples: int,
    mc_seed: int,
    grid: tuple[int, int, int] = GRID,
) -> BayesRun:
    c = line.config
    fit_sd = _fit_sd(line)
    design = design_matrix(line.points[:, 0], line.points[:, 1]).T
    rng = np.random.default_rng(mc_seed)
    pairs = observed_lots(line, warm_lots + lots)[warm_lots:]
    ps, means, sds, truth = [], [], [], []
    for lot, noisy in pairs:
        tools = tool_array(line, lot)
        residual = noisy - tools[None]
        tool_total = tools[0].sum(axis=0) - tools[1].sum(axis=0)
        p = np.zeros((len(lot.serials), c.layers))
        for k in range(1, c.layers + 1):
            post = posterior(c, fit_sd, residual, tool_total, k, grid)
            p[:, k - 1] = p_fail(post, design, c.ftb_limit_um, samples, rng)
            if k == 3:
                m, s = post.term_moments(2)
                means.append(m)
                sds.append(s)
        ps.append(p)
        truth.append(lot.terms[:, 0, :, 2].sum(axis=1) - lot.terms[:, 1, :, 2].sum(axis=1))
    scored = [lot for lot, _ in pairs]
    return BayesRun(
        lots=scored,
        p=np.concatenate(ps),
        fails=np.concatenate([line.final_ftb_worst(lot) > c.ftb_limit_um for lot in scored]),
        z_mean=np.concatenate(means),
        z_sd=np.concatenate(sds),
        truth_sx=np.concatenate(truth),
        growing=np.concatenate([lot.growing for lot in scored]),
    )


def print_scores(p: np.ndarray, y: np.ndarray, samples: int | None) -> None:
    head = "layer   n  sum p  fails  ratio  Brier  skill"
    print(head + ("  (MC se of sum p)" if samples else ""))
    for k in CHECK_LAYERS:
        sc = layer_score(p[:, k - 1], y, k)
        mc = ""
        if samples:
            mc = f"  {np.sqrt(np.sum(p[:, k - 1] * (1 - p[:, k - 1])) / samples):.2f}"
        print(
            f"{k:5d} {sc.n:3d} {sc.sum_p:6.1f} {sc.failures:6d} {sc.ratio:6.2f} "
            f"{sc.brier:6.3f} {sc.skill:6.2f}{mc}"
        )
    ratios = [p[:, k].sum() / max(int(y.sum()), 1) for k in range(p.shape[1])]
    print("sum p / failures at layers 1..12: " + " ".join(f"{r:.2f}" for r in ratios))


def print_reliability(p: np.ndarray, y: np.ndarray) -> None:
    """Reliability pooled over layers 1..12 (panels repeat across layers, so the binomial se
    is optimistic): per bin of p the count, mean p and observed failure frequency."""
    sc = layer_score(p.ravel(), np.repeat(y, p.shape[1]), 0)
    print("reliability, layers 1..12 pooled:  p bin        n   mean p  observed")
    for lo, hi, n, mean_p, observed in sc.reliability:
        print(
            f"                                   {lo:4.2f}-{hi:4.2f} {n:5d} {mean_p:8.3f} "
            f"{observed:9.3f}"
        )


def print_flags(p: np.ndarray, y: np.ndarray) -> None:
    print("hysteresis flags by layer 9:  enter leave  false alarm  miss   hit    flapping")
    for enter, leave in FLAG_PAIRS:
        ps = panel_scores(flags(p, enter, leave), y, by=9)
        print(
            f"                              {enter:4.2f}  {leave:4.2f}  "
            f"{ps.false_alarm.value:10.3f} {ps.miss.value:6.3f} {ps.hit.value:5.3f} "
            f"{ps.flapping.value:9.3f}"
        )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--warm-lots", type=int, default=23)
    ap.add_argument("--lots", type=int, default=16)
    ap.add_argument("--seed", type=int, default=2026)
    add_line_options(ap)
    ap.add_argument("--samples", type=int, default=10000, help="Monte Carlo draws a panel/layer")
    ap.add_argument("--mc-seed", type=int, default=None, help="default: seed + 2")
    ap.add_argument(
        "--grid-scale",
        type=float,
        default=1.0,
        help="multiply the grid (72 angles x 21 sizes, 25 g) by this",
    )
    ap.add_argument("--save", type=Path, default=None, help="save p per panel and layer (.npz)")
    ap.add_argument(
        "--compare",
        action="store_true",
        help="also run line_core.run_core and the oracle on the same line",
    )
    args = ap.parse_args()
    config = line_config(args)
    grid = tuple(max(1, round(g * args.grid_scale)) for g in GRID)
    assert len(grid) == 3
    t = time.perf_counter()
    line = Line(config, seed=args.seed)
    mc_seed = args.seed + 2 if args.mc_seed is None else args.mc_seed
    run = run_bayes(
        line,
        warm_lots=args.warm_lots,
        lots=args.lots,
        samples=args.samples,
        mc_seed=mc_seed,
        grid=(grid[0], grid[1], grid[2]),
    )
    y, p = run.fails, run.p
    print(
        f"Bayes bound, seed {args.seed}, grid {grid}, {args.samples} draws: "
        f"{len(y)} panels scored, {int(y.sum())} fail (base rate {y.mean():.3f})"
    )
    print_scores(p, y, args.samples)
    print_reliability(p, y)
    print_sweep(p, y)
    print_flags(p, y)
    for label, sel in (("growing core scale", run.growing), ("all panels", np.ones_like(y))):
        z = z_scores(run.truth_sx[sel], run.z_mean[sel], run.z_sd[sel])
        z = z[np.isfinite(z)]
        print(
            f"{label}, final Sx after layer 3: mean z {z.mean():+.2f} "
            f"(se {z.std(ddof=1) / np.sqrt(z.size):.2f}), sd z {z.std(ddof=1):.2f}, n {z.size}"
        )
    print(f"run time {time.perf_counter() - t:.0f} s")
    if args.save is not None:
        np.savez(
            args.save,
            p=p,
            fails=y,
            serials=np.array([s for lot in run.lots for s in lot.serials]),
            seed=args.seed,
            samples=args.samples,
        )
        print(f"saved p to {args.save}")
    if args.compare:
        compare(config, args, run)


def compare(config: LineConfig, args: argparse.Namespace, bayes: BayesRun) -> None:
    """The core model and the oracle on the same line, scored the same way."""
    t = time.perf_counter()
    line = Line(config, seed=args.seed)
    core = run_core(line, lots=args.warm_lots + args.lots, score_from=args.warm_lots)
    scored = [lot for lot in core.lots if lot.start_step >= args.warm_lots]
    assert all(np.array_equal(a.terms, b.terms) for a, b in zip(scored, bayes.lots, strict=True))
    p_core = np.array([core.p[s] for lot in scored for s in lot.serials])
    # The oracle as calibration_oracle.main draws it (rng seed + 1, lots then layers).
    line_o = Line(config, seed=args.seed)
    lots = [line_o.new_lot(f"S{j:03d}", j, prefix="L") for j in range(args.warm_lots + args.lots)]
    rng = np.random.default_rng(args.seed + 1)
    p_oracle = np.concatenate(
        [
            np.stack(
                [oracle_p(line_o, lot, k, 2000, rng) for k in range(1, config.layers + 1)], axis=1
            )
            for lot in lots[args.warm_lots :]
        ]
    )
    y = bayes.fails
    for name, p in (
        ("core model (line_core.run_core)", p_core),
        ("oracle (calibration_oracle.oracle_p, 2000 draws)", p_oracle),
    ):
        print(f"\n{name}, seed {args.seed}")
        print_scores(p, y, None)
        print_flags(p, y)
    # If the bound's p is E[fail | measurements], then for any q from the same measurements
    # E[(q - y)^2 - (p - y)^2] = E[(q - p)^2] >= 0: the paired Brier gap is estimated twice, from
    # the outcomes (noisy) and as mean (q - p)^2 (no outcome noise); they should agree. The
    # oracle sees more than the measurements, so only the observed gap means anything for it.
    print(
        "\nBrier gap to the bound, by layer: observed mean[(q-y)^2 - (p-y)^2] (se) | mean (q-p)^2"
    )
    for name, q in (("core", p_core), ("oracle", p_oracle)):
        cells = []
        for k in CHECK_LAYERS:
            pk, qk = bayes.p[:, k - 1], q[:, k - 1]
            d = (qk - y) ** 2 - (pk - y) ** 2
            se = d.std(ddof=1) / np.sqrt(d.size)
            free = f"{np.mean((qk - pk) ** 2):.4f}" if name == "core" else "  -   "
            cells.append(f"L{k} {d.mean():+.4f} ({se:.4f}) | {free}")
        print(f"  {name:6s} " + "   ".join(cells))
    print(f"compare run time {time.perf_counter() - t:.0f} s")


if __name__ == "__main__":
    main()
