"""The lattice certificate against independent computations: every start followed step by step with
the golden interpreter (brute force), the band's reachable set grown with the golden step itself,
and band membership measured with scipy's KD-tree. Coarse formats and a low loop rate keep the
lattices small; the full-size run is in tests/bench/bench_certificate.py."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy.spatial import cKDTree

from orbitfix.gen.errors import InputError
from orbitfix.gen.model.model_file import load_model
from orbitfix.gen.pipeline import design
from orbitfix.gen.program import golden
from orbitfix.verify.proofs.certificate import certify
from orbitfix.verify.report.certificate import certificate_json, certificate_lines


def small_design(fraction_bits: int, loop_hz: float | None = None):
    model = load_model("vanderpol").with_fixed_point(word_bits=16, fraction_bits=fraction_bits)
    if loop_hz is not None:
        model = replace(model, rhythm=replace(model.rhythm, loop_hz=loop_hz))
    return design(model)


@pytest.fixture(scope="module")
def coarse():
    """Van der Pol in Q10.6 stepped at 100 Hz: about 200 000 lattice states."""
    return small_design(6, loop_hz=100.0)


@pytest.fixture(scope="module")
def coarse_certificate(coarse):
    return certify(coarse, keep_tables=True)


def lattice_lookup(mask: np.ndarray, lattice, states: np.ndarray) -> np.ndarray:
    """mask[state] for integer states, False outside the lattice domain."""
    return np.append(mask, False)[lattice.index(states)]


def brute_force_steps(program, starts: np.ndarray, inner: np.ndarray, lattice,
                      limit: int) -> np.ndarray:
    """Steps from each start to the inner band, following every start with golden.step; -1 if it
    has not arrived after ``limit`` steps."""
    arrived = np.full(starts.shape[1], -1, dtype=np.int64)
    active = np.arange(starts.shape[1])
    state = starts.copy()
    for t in range(limit + 1):
        now = lattice_lookup(inner, lattice, state)
        arrived[active[now]] = t
        active, state = active[~now], state[:, ~now]
        if not active.size:
            break
        state = golden.step(program, state)
    return arrived


def test_steps_to_band_match_brute_force_for_every_start(coarse, coarse_certificate) -> None:
    # Source: brute force, every start of the box stepped one golden step at a time.
    cert, tables = coarse_certificate, coarse_certificate.tables
    lattice = tables["lattice"]
    box = np.flatnonzero(tables["in_box"])
    starts = lattice.states(box)
    limit = 3000
    brute = brute_force_steps(coarse.plan.program, starts, tables["inner"], lattice, limit)
    never = tables["never"][box]
    assert cert.box_states == box.size > 100_000
    assert np.array_equal(brute[~never], tables["steps"][box][~never])
    assert np.all(brute[never] == -1)
    assert cert.steps_bound == int(brute.max()) < limit


def test_states_that_never_arrive_end_on_an_integer_cycle_outside_the_band(coarse,
                                                                           coarse_certificate) -> None:
    # Source: brute force; each such start is followed until a state repeats, which proves it
    # never arrives, since the map is deterministic.
    tables = coarse_certificate.tables
    lattice = tables["lattice"]
    stuck = np.flatnonzero(tables["in_box"] & tables["never"])
    assert stuck.size == coarse_certificate.exception_count > 0
    program = coarse.plan.program
    for start in lattice.states(stuck).T[:200]:
        seen: set[tuple[int, int]] = set()
        state = start.reshape(2, 1)
        while (key := (int(state[0, 0]), int(state[1, 0]))) not in seen:
            assert not lattice_lookup(tables["inner"], lattice, state)[0]
            seen.add(key)
            state = golden.step(program, state)
        assert len(seen) < 10_000


def test_reachable_set_of_the_band_matches_growth_with_the_golden_step(coarse,
                                                                       coarse_certificate) -> None:
    # Source: brute force; the set grown with golden.step (not the table) until nothing is new.
    tables = coarse_certificate.tables
    lattice = tables["lattice"]
    inside = set(map(tuple, lattice.states(np.flatnonzero(tables["inner"])).T.tolist()))
    frontier = np.array(sorted(inside)).T
    while frontier.size:
        after = {tuple(s) for s in golden.step(coarse.plan.program, frontier).T.tolist()}
        new = after - inside
        inside |= new
        frontier = np.array(sorted(new), dtype=np.int64).T
    reached = np.array(sorted(inside)).T
    assert len(inside) == coarse_certificate.reachable_states
    assert coarse_certificate.invariant
    assert np.all(lattice_lookup(tables["within"], lattice, reached))


def test_band_edges_agree_with_a_kd_tree_distance_to_the_cycle(coarse, coarse_certificate) -> None:
    # Source: scipy.spatial.cKDTree distance to the cycle's samples joined by straight pieces.
    cert, tables = coarse_certificate, coarse_certificate.tables
    lattice = tables["lattice"]
    half = np.array(cert.half_range)
    samples = coarse.analysis.cycle.samples
    closed = np.hstack([samples, samples[:, :1]])
    fine = np.linspace(0, 1, 20, endpoint=False)
    pieces = closed[:, :-1, None] + (closed[:, 1:] - closed[:, :-1])[:, :, None] * fine
    tree = cKDTree((pieces.reshape(2, -1) / half[:, None]).T)
    index = np.arange(lattice.size)
    scale = 2.0 ** np.array(coarse.plan.program.state_fraction_bits)
    points = lattice.states(index) / scale[:, None] / half[:, None]
    distance, _ = tree.query(points.T, distance_upper_bound=0.2)
    slack = cert.distance_error + 1e-3        # the straight pieces stray a little from the curve
    assert cert.distance_error < 0.2 * cert.band
    for width, mask in ((cert.band, tables["inner"]), (cert.tolerance, tables["within"])):
        assert np.all(mask[distance <= width - slack])
        assert not np.any(mask[distance > width + slack])


def test_origin_is_a_fixed_point_so_the_whole_box_is_not_proved(coarse, coarse_certificate) -> None:
    # Source: brute force; the golden step leaves (0, 0) where it is (no constant term in the
    # Van der Pol step, common practice).
    cert = coarse_certificate
    assert golden.step(coarse.plan.program, np.zeros((2, 1), dtype=np.int64))[:, 0].tolist() == [0, 0]
    assert not cert.proved
    first = cert.exceptions[0]
    assert first.fate == "fixed point"
    assert first.end_state == (0, 0)
    assert "unstable focus at (0, 0)" in first.near_equilibrium
    assert any("unstable focus" in reason for reason in cert.reasons)
    assert cert.cover_radius is not None
    text = "\n".join(certificate_lines(cert))
    assert "NOT PROVED" in text and "(0, 0)" in text


def test_excluding_the_equilibrium_neighbourhood_proves_the_rest(coarse, coarse_certificate) -> None:
    # Source: the brute-force test above fixes which states never arrive; all lie within the
    # reported radius, so excluding slightly more must leave a proof.
    radius = coarse_certificate.cover_radius * 1.01 + 1e-9
    cert = certify(coarse, exclude_radius=radius)
    assert cert.proved
    assert cert.exception_count == 0
    assert cert.excluded_states >= coarse_certificate.exception_count
    assert cert.certified_states == cert.box_states - cert.excluded_states
    data = certificate_json(cert)
    assert data["proved"] is True
    assert data["states_checked"] == cert.states_checked >= cert.box_states
    assert data["band"]["inner"] == 0.03 and data["band"]["tolerance"] == 0.08
    assert data["steps_bound"] == cert.steps_bound
    assert "PROVED" in certificate_lines(cert)[0]


def test_too_few_fraction_bits_at_the_full_loop_rate_stall_on_the_cycle() -> None:
    # Source: brute force; a Q10.6 state stepped at 1 kHz moves by less than half its last bit on
    # the cycle's slow stretch, so the golden step leaves it where it is.
    bad = small_design(6)
    cert = certify(bad, box={"x": (-2.4, 2.4), "y": (-3.0, 3.0)}, exclude_radius=0.2)
    assert not cert.proved
    stalls = [g for g in cert.exceptions if g.fate == "fixed point"]
    assert stalls and stalls[0].near_equilibrium is None
    end = np.array(stalls[0].end_state).reshape(2, 1)
    assert np.array_equal(golden.step(bad.plan.program, end), end)
    assert max(abs(v) for v in stalls[0].end_state_real) > 1.0      # far from the origin
    assert cert.cover_radius > 0.2


def test_band_narrower_than_the_integer_deviation_fails_invariance(coarse) -> None:
    # Source: brute force; the escape path is replayed with golden.step.
    cert = certify(coarse, band=0.004, tolerance=0.008, exclude_radius=0.5)
    assert not cert.invariant and not cert.proved
    path = np.array(cert.escape_path).T
    replay = golden.step(coarse.plan.program, path[:, :-1])
    assert np.array_equal(replay, path[:, 1:])
    assert any("leaves the tolerance band" in reason for reason in cert.reasons)
    assert "invariance FAILS" in "\n".join(certificate_lines(cert))


def test_refusals_name_what_to_do(vanderpol_design, coarse) -> None:
    # Source: the interface: planar, 16-bit models only; bad options are input errors.
    with pytest.raises(InputError, match="use --word 16"):
        certify(vanderpol_design)
    matsuoka = design(load_model("matsuoka").with_fixed_point(word_bits=16))
    with pytest.raises(InputError, match="planar"):
        certify(matsuoka)
    with pytest.raises(InputError, match="wider than the inner band"):
        certify(coarse, band=0.05, tolerance=0.05)
    with pytest.raises(InputError, match="inner band must be wider than 0"):
        certify(coarse, band=0.0)
    with pytest.raises(InputError, match="exactly the states x, y"):
        certify(coarse, box={"x": (-1, 1), "z": (-1, 1)})
    with pytest.raises(InputError, match="low < high"):
        certify(coarse, box=[(1.0, -1.0), (-1.0, 1.0)])
    with pytest.raises(InputError, match="fewer fraction bits or a smaller box"):
        certify(coarse, box=[(-500.0, 500.0), (-500.0, 500.0)])


def test_band_in_strips_equals_the_band_in_one_piece(coarse, coarse_certificate, monkeypatch) -> None:
    # Source: scipy's distance transform over the whole region at once (strips of 2048 rows cover
    # this coarse lattice in one piece), against strips of 7 rows with their halos.
    import orbitfix.verify.proofs.certificate.lattice as lattice

    monkeypatch.setattr(lattice, "STRIP_ROWS", 7)
    striped = certify(coarse, keep_tables=True)
    whole = coarse_certificate.tables
    assert np.array_equal(striped.tables["inner"], whole["inner"])
    assert np.array_equal(striped.tables["within"], whole["within"])
    assert striped.steps_bound == coarse_certificate.steps_bound


def test_a_box_wholly_excluded_proves_nothing(coarse) -> None:
    # Source: common practice; a claim over no states is no proof.
    cert = certify(coarse, box={"x": (-0.05, 0.05), "y": (-0.05, 0.05)}, exclude_radius=0.5)
    assert cert.box_states > 0 and cert.excluded_states == cert.box_states
    assert not cert.proved
    assert any("no state of the box is left" in reason for reason in cert.reasons)
