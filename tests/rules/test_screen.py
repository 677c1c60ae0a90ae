"""The screen: soft-binned histograms, blocked top-k, exact re-rank, against the exact score."""

import numpy as np
import pytest

from harmony import colour
from harmony.photo.palette import Palette, neutrality
from harmony.rules import load_rules
from harmony.rules import screen as sc
from harmony.rules.score import pair_raw


def moon_spencer_kernel(jab_a, jab_b):
    """A kernel made only from published hue relations, independent of harmony.rules.

    Moon & Spencer (1944), as commonly cited: identity, similarity (7-12 Munsell hue steps, about
    25-43 degrees) and contrast (28-50 steps, about 100-180 degrees) are harmonious; the ambiguity
    between similarity and contrast (12-28 steps, about 43-100 degrees) is not. One Munsell hue
    step is 3.6 degrees. Widths are hand-set; neutrals go with anything (common practice).
    """
    ja, jb = np.asarray(jab_a, float), np.asarray(jab_b, float)
    ha = np.degrees(np.arctan2(ja[:, 2], ja[:, 1]))[:, None]
    hb = np.degrees(np.arctan2(jb[:, 2], jb[:, 1]))[None, :]
    d = np.abs((ha - hb + 180.0) % 360.0 - 180.0)

    def bump(centre, spread):
        return np.exp(-0.5 * ((d - centre) / spread) ** 2)

    hue = bump(0.0, 10.0) + bump(34.0, 10.0) + bump(140.0, 25.0) - 0.8 * bump(72.0, 14.0)
    na, nb = neutrality(ja)[:, None], neutrality(jb)[None, :]
    return (1 - na) * (1 - nb) * hue + 0.5 * (na + nb - na * nb)


def synthetic_stack(n, rng, k=8):
    """Plausible palettes: a base sRGB colour with shades of it and a few random accents."""
    base = rng.random((n, 1, 3))
    shades = base + rng.normal(0.0, 0.08, (n, k, 3))
    accents = rng.random((n, k, 3))
    srgb1 = np.clip(np.where(rng.random((n, k, 1)) < 0.3, accents, shades), 0.0, 1.0)
    weights = np.sort(rng.dirichlet(np.full(k, 0.7), n), axis=1)[:, ::-1]
    return sc.PaletteStack(colour.srgb1_to_jab(srgb1), weights)


@pytest.fixture(scope="module")
def sofa_rug():
    return load_rules().for_pair("sofa", "rug")


KERNELS = {"moon_spencer": moon_spencer_kernel, "default_rules": None}


def _kernel(name, sofa_rug):
    return sofa_rug.kernel if KERNELS[name] is None else KERNELS[name]


@pytest.mark.parametrize("name", sorted(KERNELS))
def test_screen_top10_equals_exact_top10_on_a_small_catalogue(name, sofa_rug):
    kernel = _kernel(name, sofa_rug)
    rng = np.random.default_rng(5)
    a, b = synthetic_stack(40, rng), synthetic_stack(120, rng)
    exact = sc.exact_top_k(a, b, kernel, k=10)
    screened = sc.screen_top_k(a, b, kernel, k=10)
    assert screened.exact and screened.candidates == 15
    np.testing.assert_array_equal(screened.indices, exact.indices)
    np.testing.assert_allclose(screened.raw, exact.raw, rtol=0, atol=1e-12)


def test_exact_raw_follows_the_bilinear_contract_of_the_pair_score(sofa_rug):
    # The exact baseline must be the score module's raw score, pair by pair.
    rng = np.random.default_rng(6)
    a, b = synthetic_stack(3, rng), synthetic_stack(9, rng)
    pals_b = [Palette(b.jab[j], b.weights[j]) for j in range(9)]
    pal_a = Palette(a.jab[1], a.weights[1])
    want = [pair_raw(pal_a, p, sofa_rug) for p in pals_b]
    np.testing.assert_allclose(sc.exact_raw(pal_a, pals_b, sofa_rug.kernel), want, rtol=1e-12, atol=1e-12)
    cand = np.array([[8, 0, 3]])
    got = sc.exact_raw_candidates(sc.PaletteStack(a.jab[1:2], a.weights[1:2]), b, cand, sofa_rug.kernel)
    np.testing.assert_allclose(got[0], np.array(want)[[8, 0, 3]], rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("name", sorted(KERNELS))
@pytest.mark.parametrize("interpolation", ["linear", "cubic"])
def test_screened_scores_track_the_exact_scores(name, interpolation, sofa_rug):
    kernel = _kernel(name, sofa_rug)
    rng = np.random.default_rng(7)
    a, b = synthetic_stack(30, rng), synthetic_stack(50, rng)
    grid = sc.BinGrid(interpolation=interpolation)
    approx = sc.screen_scores(a, b, kernel, grid=grid)
    exact = np.array([sc.exact_raw(sc.PaletteStack(a.jab[i : i + 1], a.weights[i : i + 1]), b, kernel) for i in range(30)])
    assert np.corrcoef(approx.ravel(), exact.ravel())[0, 1] > 0.99
    # Cubic convolution is the closer approximation at the same spacing (Keys 1981).
    if interpolation == "cubic":
        linear = sc.screen_scores(a, b, kernel, grid=sc.BinGrid(interpolation="linear"))
        assert np.abs(approx - exact).mean() < np.abs(linear - exact).mean()


def test_blocked_top_k_equals_unblocked():
    rng = np.random.default_rng(8)
    q = rng.normal(size=(23, 5)).astype(np.float32)
    hb = rng.normal(size=(5, 31)).astype(np.float32)
    want = np.sort(np.argsort(-(q @ hb), axis=1)[:, :6], axis=1)
    for block in (1, 7, 31, 1000):
        got = np.sort(sc.top_k_blocked(q, hb, 6, block=block), axis=1)
        np.testing.assert_array_equal(got, want)
    # k larger than the other side keeps every column.
    assert sc.top_k_blocked(q, hb, 50, block=7).shape == (23, 31)


def test_screen_with_block_7_equals_the_default_block(sofa_rug):
    rng = np.random.default_rng(9)
    a, b = synthetic_stack(20, rng), synthetic_stack(45, rng)
    one = sc.screen_top_k(a, b, sofa_rug.kernel, k=5, block=7)
    two = sc.screen_top_k(a, b, sofa_rug.kernel, k=5)
    np.testing.assert_array_equal(one.indices, two.indices)
    np.testing.assert_array_equal(one.raw, two.raw)


def test_histograms_keep_the_weight_and_split_neutrals_from_chromatic_colours():
    grid = sc.BinGrid(hue_bins=12, lightness_bins=11, interpolation="linear")
    centres = sc.bin_centres(grid)
    # A colour on a chromatic centre lands wholly in that bin; a grey on a grey-axis level too.
    pal = sc.PaletteStack(np.array([[centres[5 * 11 + 4], [60.0, 0.0, 0.0]]]), np.array([[0.7, 0.3]]))
    hist, _ = sc.histograms(pal, grid)
    assert hist[0, 5 * 11 + 4] == pytest.approx(0.7)
    assert hist[0, grid.n_chromatic + 6] == pytest.approx(0.3)
    rng = np.random.default_rng(10)
    hist, _ = sc.histograms(synthetic_stack(50, rng), sc.BinGrid())
    np.testing.assert_allclose(hist.sum(axis=1), 1.0, atol=1e-12)


def test_cubic_weights_reproduce_quadratics():
    # Keys (1981): the a = -1/2 cubic convolution kernel reproduces polynomials up to degree 2,
    # and its weights sum to 1.
    pos = np.linspace(2.0, 6.99, 37)
    nodes, w = sc._axis_weights(pos, 10, False, "cubic")
    np.testing.assert_allclose(w.sum(axis=-1), 1.0, atol=1e-12)
    for f in (lambda x: 3.0 * x - 1.0, lambda x: 0.5 * x * x - x + 2.0):
        np.testing.assert_allclose((w * f(nodes.astype(float))).sum(axis=-1), f(pos), atol=1e-12)


def test_rank_truncation_stays_within_its_bound(sofa_rug):
    rng = np.random.default_rng(11)
    a, b = synthetic_stack(15, rng), synthetic_stack(25, rng)
    full = sc.screen_scores(a, b, sofa_rug.kernel, rank_tol=1e-12)
    prep = sc._prepare(a, b, sofa_rug.kernel, sc.BinGrid(), 0.05, 64)
    assert 0 < prep.rank < 200 and prep.bound > 0
    cut = prep.q.astype(float) @ prep.hb.astype(float)
    assert np.abs(cut - full).max() <= prep.bound * (1 + 1e-4) + 1e-5


def test_k_is_clipped_and_ties_go_to_the_lower_index():
    # Identical partners tie exactly; the lower index comes first.
    one = np.array([[[50.0, 20.0, 5.0], [70.0, 0.0, 0.0]]])
    a = sc.PaletteStack(one, np.array([[0.6, 0.4]]))
    b = sc.PaletteStack(np.repeat(one, 3, axis=0), np.repeat([[0.6, 0.4]], 3, axis=0))
    res = sc.screen_top_k(a, b, moon_spencer_kernel, k=10)
    assert res.indices.tolist() == [[0, 1, 2]]
    assert res.raw[0, 0] == res.raw[0, 2]


def test_bad_arguments_raise_clear_errors():
    rng = np.random.default_rng(12)
    a, b = synthetic_stack(3, rng), synthetic_stack(4, rng)
    with pytest.raises(ValueError, match="k must be at least 1"):
        sc.screen_top_k(a, b, moon_spencer_kernel, k=0)
    with pytest.raises(ValueError, match=r"candidates \(2\) must be at least k \(5\)"):
        sc.screen_top_k(a, b, moon_spencer_kernel, k=5, candidates=2)
    with pytest.raises(ValueError, match="kernel returned shape"):
        sc.screen_top_k(a, b, lambda x, y: np.zeros((2, 2)), k=1)
    with pytest.raises(ValueError, match="non-finite"):
        sc.screen_top_k(a, b, lambda x, y: np.full((len(x), len(y)), np.nan), k=1)
    with pytest.raises(ValueError, match="block must be at least 1"):
        sc.top_k_blocked(np.zeros((2, 2)), np.zeros((2, 2)), 1, block=0)
    with pytest.raises(ValueError, match="interpolation must be"):
        sc.BinGrid(interpolation="spline")
    with pytest.raises(TypeError, match="not a Palette"):
        sc.PaletteStack.from_palettes([np.zeros((2, 3))])


# ---- batched exact re-rank, kernel forms, factorisation ----------------------------------------


class MoonSpencerPairwise:
    """moon_spencer_kernel in broadcasting form (the same published relations, elementwise)."""

    def pairwise(self, jab_a, jab_b):
        ja, jb = np.asarray(jab_a, float), np.asarray(jab_b, float)
        d = np.abs((np.degrees(np.arctan2(ja[..., 2], ja[..., 1]) - np.arctan2(jb[..., 2], jb[..., 1])) + 180.0) % 360.0 - 180.0)

        def bump(centre, spread):
            return np.exp(-0.5 * ((d - centre) / spread) ** 2)

        hue = bump(0.0, 10.0) + bump(34.0, 10.0) + bump(140.0, 25.0) - 0.8 * bump(72.0, 14.0)
        na, nb = neutrality(ja), neutrality(jb)
        return (1 - na) * (1 - nb) * hue + 0.5 * (na + nb - na * nb)


def test_pairwise_form_of_the_independent_kernel_matches_its_outer_form():
    rng = np.random.default_rng(30)
    a, b = synthetic_stack(2, rng), synthetic_stack(3, rng)
    ja, jb = a.jab.reshape(-1, 3), b.jab.reshape(-1, 3)
    np.testing.assert_allclose(sc.outer_form(MoonSpencerPairwise())(ja, jb), moon_spencer_kernel(ja, jb), atol=1e-12)


@pytest.mark.parametrize("form", ["rules", "bound_kernel", "independent"])
@pytest.mark.parametrize("chunk", [1, 700, sc.RERANK_CHUNK])
def test_batched_rerank_equals_the_per_product_rerank(form, chunk, sofa_rug):
    batched, looped = {
        "rules": (sofa_rug, lambda x, y: sofa_rug.kernel(x, y)),
        "bound_kernel": (sofa_rug.kernel, lambda x, y: sofa_rug.kernel(x, y)),
        "independent": (MoonSpencerPairwise(), moon_spencer_kernel),
    }[form]
    assert sc.pairwise_form(batched) is not None and sc.pairwise_form(looped) is None
    rng = np.random.default_rng(31)
    a, b = synthetic_stack(23, rng, k=7), synthetic_stack(40, rng, k=9)
    cand = np.stack([rng.choice(40, size=6, replace=False) for _ in range(23)])
    want = sc.exact_raw_candidates(a, b, cand, looped)
    for workers in (1, 2):
        got = sc.exact_raw_candidates(a, b, cand, batched, workers=workers, chunk=chunk)
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)
    # The independent kernel's per-product re-rank is its bilinear sum, product by product.
    if form == "independent":
        i, t = 5, 2
        k = moon_spencer_kernel(a.jab[i], b.jab[cand[i, t]])
        assert want[i, t] == pytest.approx(a.weights[i] @ k @ b.weights[cand[i, t]], abs=1e-12)


@pytest.mark.parametrize("kernel", ["rules", "independent"])
def test_screen_with_a_broadcasting_kernel_equals_exact_top10(kernel, sofa_rug):
    kern = sofa_rug if kernel == "rules" else MoonSpencerPairwise()
    outer = sofa_rug.kernel if kernel == "rules" else moon_spencer_kernel
    rng = np.random.default_rng(32)
    a, b = synthetic_stack(40, rng), synthetic_stack(120, rng)
    exact = sc.exact_top_k(a, b, outer, k=10)
    screened = sc.screen_top_k(a, b, kern, k=10)
    assert screened.candidates == 15 and screened.rank > 0
    np.testing.assert_array_equal(screened.indices, exact.indices)
    np.testing.assert_allclose(screened.raw, exact.raw, rtol=0, atol=1e-12)
    # Below exact_below every pair is scored exactly: the same answer without the screen.
    small = sc.screen_top_k(a, b, kern, k=10, exact_below=40 * 120)
    assert small.candidates == 120 and small.rank == 0
    np.testing.assert_array_equal(small.indices, exact.indices)
    np.testing.assert_allclose(small.raw, exact.raw, rtol=0, atol=1e-12)


def test_not_a_kernel_is_a_type_error():
    rng = np.random.default_rng(33)
    a, b = synthetic_stack(3, rng), synthetic_stack(4, rng)
    with pytest.raises(TypeError, match="a kernel must be callable or have a pairwise method, got int"):
        sc.screen_top_k(a, b, 3, k=1)


@pytest.mark.parametrize("shape, rank", [((240, 200), 30), ((260, 200), 150), ((90, 120), 30)])
def test_low_rank_matches_numpy_svd(shape, rank):
    # Gold: numpy.linalg.svd (LAPACK gesdd) of the same matrix. A matrix of known rank plus a
    # tail of small singular values below the tolerance.
    rng = np.random.default_rng(34)
    n, m = shape
    u, _ = np.linalg.qr(rng.normal(size=(n, rank + 10)))
    v, _ = np.linalg.qr(rng.normal(size=(m, rank + 10)))
    s = np.concatenate([np.geomspace(100.0, 1.0, rank), np.full(10, 1e-7)])
    k = (u * s) @ v.T
    left, right, got_rank, residual = sc.low_rank(k, rank_tol=1e-6)
    sv = np.linalg.svd(k, compute_uv=False)
    assert got_rank == int(np.count_nonzero(sv > 1e-6 * sv[0])) == rank
    np.testing.assert_allclose(np.linalg.svd(left @ right.T, compute_uv=False)[:rank], sv[:rank], rtol=1e-9)
    err = np.linalg.norm(k - left @ right.T, 2)
    assert err <= residual * (1 + 1e-9) + 1e-15
    assert residual <= np.sqrt(10) * 1e-7 * (1 + 1e-6)


@pytest.mark.parametrize("sample", [4, 64, 10_000])
def test_threshold_selection_is_the_exact_top_k_with_ties_to_the_lower_column(sample):
    # Reference: a full stable sort of every row (numpy). Scores rounded to a coarse grid so that
    # many ties sit at the k-th value; sample 4 forces rows whose sampled threshold is not met.
    from harmony.rules.screen import top_k_blocked

    rng = np.random.default_rng(77)
    q = np.round(rng.standard_normal((300, 5)), 1).astype(np.float32)
    hb = np.round(rng.standard_normal((5, 700)), 1).astype(np.float32)
    got = top_k_blocked(q, hb, 12, block=128, sample=sample)
    s = q @ hb
    for i in range(300):
        want = np.argsort(-s[i], kind="stable")[:12]
        # The same multiset of scores (which columns win a tie at the k-th value may differ).
        assert np.array_equal(np.sort(s[i, got[i]]), np.sort(s[i, want]))
        assert len(set(got[i].tolist())) == 12


def test_one_screen_serves_both_directions():
    # Reference: screen_top_k run separately for each direction (the old way).
    from harmony.rules.screen_pairs import screen_both_ways

    rng = np.random.default_rng(8)
    a = synthetic_stack(220, rng)
    b = synthetic_stack(260, rng)
    rules = load_rules()
    pr_ab, pr_ba = rules.for_pair("sofa", "rug"), rules.for_pair("rug", "sofa")
    in_b = np.flatnonzero(rng.random(260) > 0.1)
    in_a = np.flatnonzero(rng.random(220) > 0.1)
    ab, ba = screen_both_ways(a, b, pr_ab, pr_ba, k=10, partners_a=in_a, partners_b=in_b)
    sub_a = sc.PaletteStack(a.jab[in_a], a.weights[in_a])
    sub_b = sc.PaletteStack(b.jab[in_b], b.weights[in_b])
    exact_ab = sc.exact_top_k(a, sub_b, pr_ab, k=10)
    exact_ba = sc.exact_top_k(b, sub_a, pr_ba, k=10)
    for got, want in ((ab, exact_ab), (ba, exact_ba)):
        recall = np.mean([len(set(g) & set(w)) / 10 for g, w in zip(got.indices, want.indices)])
        assert recall >= 0.99  # the screen's recall target (benchmarks/screen.py)
        same = np.all(got.indices == want.indices, axis=1)
        np.testing.assert_allclose(got.raw[same], want.raw[same], rtol=1e-12, atol=1e-12)


def test_gathered_colour_quantities_give_the_same_bits_as_pairwise(sofa_rug):
    # The re-rank computes each colour's hue, neutrality and lightness once and gathers them per
    # pair; the feed's bytes depend on the raw scores, so equality here is bit for bit.
    rng = np.random.default_rng(33)
    a, b = synthetic_stack(6, rng, k=5), synthetic_stack(9, rng, k=4)
    cand = np.stack([rng.choice(9, size=3, replace=False) for _ in range(6)])
    want = sofa_rug.pairwise(a.jab[:, None, :, None, :], b.jab[cand][:, :, None, :, :])
    side_a, side_b = sofa_rug.side(a.jab), sofa_rug.side(b.jab)
    got = sofa_rug.pairwise_sides(side_a.take((slice(None), None, slice(None), None)),
                                  side_b.take(cand).take((slice(None), slice(None), None)))
    assert got.shape == (6, 3, 5, 4)
    np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("n_a", [1, 2, 37])
def test_screen_on_two_threads_gives_the_same_bits_as_one(n_a, sofa_rug):
    rng = np.random.default_rng(34)
    a, b = synthetic_stack(n_a, rng), synthetic_stack(150, rng)
    one = sc.screen_top_k(a, b, sofa_rug, k=10, block=16, workers=1)
    two = sc.screen_top_k(a, b, sofa_rug, k=10, block=16, workers=2)
    np.testing.assert_array_equal(two.indices, one.indices)
    np.testing.assert_array_equal(two.raw, one.raw)
    assert (two.rank, two.truncation_bound) == (one.rank, one.truncation_bound)
    # Both equal the exact top-10 (kernel evaluated pair by pair, no screen).
    np.testing.assert_array_equal(two.indices, sc.exact_top_k(a, b, sofa_rug.kernel, k=10).indices)
