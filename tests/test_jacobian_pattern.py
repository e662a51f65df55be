"""Python models with a Jacobian sparsity pattern (``model.python.jacobian_pattern``).

Column groups come from the greedy method of Curtis, Powell and Reid ("On the
estimation of sparse Jacobian matrices", J. Inst. Maths Applics 13 (1974)
117-119); a grouped difference Jacobian costs two calls of f per group. The
reference model is the Brusselator chain of tests/test_sparse_eigen.py
(Prigogine & Lefever, "Symmetry breaking instabilities in dissipative systems
II", J. Chem. Phys. 48 (1968) 1695), with its exact sparse Jacobian and its
homogeneous Hopf point b = 1 + a^2, and the interleaved cell chain of
tests/cell_chains.py.

The pattern functions below are importable by the scan files of these tests
(pythonpath = tests).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import cell_chains
import test_sparse_eigen as brusselator
from branchline.errors import ScanError
from branchline.model.build import build_model
from branchline.model.pattern_check import check_pattern, difference_jacobian_warning
from branchline.numerics.column_groups import (
    curtis_powell_reid_groups,
    structurally_orthogonal,
)
from branchline.numerics.differences import central_jacobian, grouped_central_jacobian
from branchline.problems.equilibrium_branch import locate_events
from branchline.runner import run_scan
from branchline.scan.loader import PythonModelSpec, scan_from_dict

A = brusselator.A
PARAMETERS = {"a": A, "b": 1.97, "d1": brusselator.D1, "d2": brusselator.D2}


# ---------------------------------------------------------------------------
# pattern functions (called as function(size))


def brusselator_pattern(size: int) -> sp.csr_matrix:
    """Where df/dx of test_sparse_eigen's Brusselator can be nonzero: states (u, v) in blocks."""
    return brusselator.brusselator_jacobian(np.ones(size), PARAMETERS) != 0


def brusselator_pattern_indices(size: int) -> tuple[np.ndarray, np.ndarray]:
    """The same pattern as (rows, cols) index arrays."""
    matrix = sp.coo_matrix(brusselator_pattern(size))
    return matrix.row, matrix.col


def chain_pattern(size: int) -> sp.csr_matrix:
    """Interleaved cells (u0, v0, u1, v1, ...) of tests/cell_chains.py: a band of half-width 2."""
    cells = size // 2
    coupling = sp.csr_matrix(cell_chains.coupling_matrix(cells) != 0)
    cell = sp.csr_matrix(np.ones((2, 2)))
    return sp.kron(coupling, sp.eye(2)) + sp.kron(sp.eye(cells), cell)


def tridiagonal_pattern(size: int) -> sp.dia_matrix:
    return sp.diags([1.0, 1.0, 1.0], [-1, 0, 1], shape=(size, size))


def pattern_of_wrong_shape(size: int) -> sp.csr_matrix:
    return sp.eye(size - 1, size, format="csr")


def pattern_that_raises(size: int):
    raise RuntimeError("no grid file")


def pattern_with_index_out_of_range(size: int):
    return np.array([0, size]), np.array([0, 0])


def pattern_with_float_indices(size: int):
    return np.array([0.0, 1.5]), np.array([0, 1])


def pattern_of_wrong_type(size: int):
    return {"rows": [0]}


def pattern_as_list(size: int) -> list:
    return [[0, 1], [0, 1]]


def pattern_as_stacked_indices(size: int) -> np.ndarray:
    return np.array([[0, 1, 2], [0, 1, 2]])


def empty_pattern(size: int) -> sp.csr_matrix:
    return sp.csr_matrix((size, size))


def pattern_missing_diffusion(size: int) -> sp.csr_matrix:
    """Only the reaction terms: misses the diffusion coupling between neighbours."""
    nodes = size // 2
    return sp.eye(size) + sp.eye(size, k=nodes) + sp.eye(size, k=-nodes)


def pattern_missing_one_entry(size: int) -> sp.lil_matrix:
    """The true pattern less one entry, d f[u3] / d u4."""
    pattern = sp.lil_matrix(brusselator_pattern(size))
    pattern[3, 4] = 0
    return pattern


def block_start(p: dict) -> np.ndarray:
    """The uniform state of test_sparse_eigen's Brusselator with 101 nodes (202 states)."""
    return np.concatenate([np.full(101, p["a"]), np.full(101, p["b"] / p["a"])])


def chain_start(p: dict) -> np.ndarray:
    """The uniform state (a, b/a) of a 101-cell chain (202 states)."""
    x = np.empty(202)
    x[0::2], x[1::2] = p["a"], p["b"] / p["a"]
    return x


# ---------------------------------------------------------------------------
# column groups


@pytest.mark.parametrize("size", [3, 10, 1001])
def test_a_tridiagonal_pattern_needs_three_groups(size):
    # Columns j and j+1, j+2 share rows j+1 and j+1, so any three consecutive
    # columns need three groups; the greedy order gives j mod 3 (Curtis, Powell &
    # Reid 1974: a tridiagonal Jacobian from three differences).
    groups = curtis_powell_reid_groups(tridiagonal_pattern(size))
    assert groups.count == 3
    np.testing.assert_array_equal(groups.group_of, np.arange(size) % 3)
    assert structurally_orthogonal(tridiagonal_pattern(size), groups)


@pytest.mark.parametrize("half_width", [1, 2, 4])
def test_a_banded_pattern_needs_one_group_per_column_of_a_row(half_width):
    # In a full band of half-width w any 2w + 1 consecutive columns share the row
    # in their middle, so 2w + 1 groups are a lower bound, and the greedy sweep
    # attains it (columns j and j + 2w + 1 share no row).
    size = 60
    pattern = sp.diags(
        [np.ones(size - abs(k)) for k in range(-half_width, half_width + 1)],
        list(range(-half_width, half_width + 1)),
    )
    groups = curtis_powell_reid_groups(pattern)
    assert groups.count == 2 * half_width + 1
    assert structurally_orthogonal(pattern, groups)


def test_a_group_of_columns_that_share_a_row_is_refused_by_the_orthogonality_check():
    pattern = tridiagonal_pattern(6)
    wrong = curtis_powell_reid_groups(sp.eye(6))  # one group: columns 0 and 1 share row 0
    assert wrong.count == 1
    assert not structurally_orthogonal(pattern, wrong)


@pytest.mark.parametrize(
    "pattern_function", [brusselator_pattern, chain_pattern], ids=["blocks", "interleaved"]
)
def test_brusselator_chains_need_few_groups_whatever_their_length(pattern_function):
    counts = set()
    for size in (20, 200, 2000):
        pattern = pattern_function(size)
        groups = curtis_powell_reid_groups(pattern)
        assert structurally_orthogonal(pattern, groups)
        counts.add(groups.count)
        # a column shares rows with at most 7 others (u_i: u_{i-2} .. u_{i+2}, v_{i-1} ..
        # v_{i+1}), and the greedy method never needs more groups than that plus one
        ones = (sp.csr_matrix(pattern) != 0).astype(float)
        shared = (ones.T @ ones).tocsr()
        assert np.max(np.diff(shared.indptr)) - 1 == 7
    (count,) = counts  # independent of n
    # row u_i holds four columns (u_{i-1}, u_i, u_{i+1}, v_i): at least 4 groups
    assert 4 <= count <= 8


# ---------------------------------------------------------------------------
# the grouped difference Jacobian


def test_grouped_jacobian_of_2000_states_matches_the_exact_one_from_few_calls():
    nodes = 1000  # 2000 states
    x = brusselator.uniform_state(nodes, 1.97) + 0.05 * np.sin(np.arange(2 * nodes))
    exact = brusselator.brusselator_jacobian(x, PARAMETERS)
    pattern = brusselator_pattern(2 * nodes)
    groups = curtis_powell_reid_groups(pattern)
    calls = []

    def rhs(z):
        calls.append(1)
        return brusselator.brusselator_rhs(z, PARAMETERS)

    grouped = grouped_central_jacobian(rhs, x, pattern, groups)
    assert sp.issparse(grouped) and grouped.shape == (2 * nodes, 2 * nodes)
    assert len(calls) == 2 * groups.count
    error = abs(grouped - exact).max() / abs(exact).max()
    assert error < 1e-7
    # the plain dense difference Jacobian: two calls per state
    calls.clear()
    dense = central_jacobian(rhs, x)
    assert len(calls) == 2 * 2 * nodes
    # the same steps column by column: equal entries up to rounding in f
    assert np.max(np.abs(grouped.toarray() - dense)) <= 1e-7 * abs(exact).max()


def pattern_model(nodes: int, **python) -> object:
    spec = PythonModelSpec(
        parameters=dict(PARAMETERS),
        rhs="test_sparse_eigen:brusselator_rhs",
        size=2 * nodes,
        **python,
    )
    return build_model(spec, "brusselator.toml")


@pytest.mark.parametrize(
    "pattern",
    [
        "test_jacobian_pattern:brusselator_pattern",
        "test_jacobian_pattern:brusselator_pattern_indices",
    ],
    ids=["sparse", "indices"],
)
def test_a_model_with_a_pattern_takes_the_sparse_path(pattern):
    model = pattern_model(50, jacobian_pattern=pattern)
    assert model.sparse and model.jacobian_pattern is not None
    x = brusselator.uniform_state(50, 1.97)
    jacobian = model.jacobian(x, model.defaults)
    assert sp.issparse(jacobian)
    exact = brusselator.brusselator_jacobian(x, PARAMETERS)
    assert abs(jacobian - exact).max() <= 1e-7 * abs(exact).max()


def test_a_trace_with_a_pattern_only_locates_the_homogeneous_hopf_point():
    # Prigogine & Lefever (1968): the uniform state's Hopf point at b = 1 + a^2,
    # frequency a; the model gives no Jacobian, only its pattern.
    nodes = 200  # 400 states
    model = pattern_model(nodes, jacobian_pattern="test_jacobian_pattern:brusselator_pattern")
    assert model.jacobian_source is None and model.sparse
    branch = brusselator.trace_uniform_through_hopf(model, nodes)
    assert branch.status == "done", branch.message
    (hopf,) = locate_events(model, branch)
    assert hopf.kind == "hopf"
    assert hopf.value == pytest.approx(1.0 + A * A, rel=1e-10)
    assert hopf.frequency == pytest.approx(A, rel=1e-8)


# ---------------------------------------------------------------------------
# bad pattern inputs: a ScanError naming file, key and problem


def python_scan(size: int = 40, **python) -> dict:
    return {
        "model": {
            "parameters": dict(PARAMETERS),
            "python": {"rhs": "test_sparse_eigen:brusselator_rhs", "size": size, **python},
        },
        "trace": [
            {"vary": "b", "interval": [1.9, 2.1], "start": "test_jacobian_pattern:chain_start"}
        ],
    }


@pytest.mark.parametrize(
    ("function", "words"),
    [
        ("pattern_of_wrong_shape", "a sparse matrix of shape (39, 40); expected (40, 40)"),
        ("nowhere", "has no attribute 'nowhere'"),
        ("pattern_that_raises", "raised RuntimeError: no grid file"),
        ("pattern_with_index_out_of_range", "rows with index 40, outside 0 .. 39"),
        ("pattern_with_float_indices", "expected integer indices"),
        ("pattern_of_wrong_type", "returned dict; expected a scipy.sparse matrix"),
        ("empty_pattern", "no entries"),
        ("pattern_as_list", "a list; return index arrays as a tuple (rows, cols)"),
        ("pattern_as_stacked_indices", "shape (2, 3); expected (40, 40) (for index arrays"),
    ],
)
def test_bad_patterns_are_scan_errors_naming_the_key(function, words):
    scan = scan_from_dict(
        python_scan(jacobian_pattern=f"test_jacobian_pattern:{function}"), "chain.toml"
    )
    with pytest.raises(ScanError) as info:
        build_model(scan.model, "chain.toml")
    assert info.value.source == "chain.toml"
    assert info.value.key == "model.python.jacobian_pattern"
    assert words in info.value.problem


def test_a_malformed_pattern_reference_is_refused_when_the_scan_is_read():
    with pytest.raises(ScanError) as info:
        scan_from_dict(python_scan(jacobian_pattern="no colon"), "chain.toml")
    assert info.value.key == "model.python.jacobian_pattern"
    assert "module:function" in info.value.problem


def test_a_missing_pattern_module_is_a_scan_error():
    scan = scan_from_dict(python_scan(jacobian_pattern="no_such_module_here:pattern"), "c.toml")
    with pytest.raises(ScanError) as info:
        build_model(scan.model, "c.toml")
    assert info.value.key == "model.python.jacobian_pattern"
    assert "cannot import module 'no_such_module_here'" in info.value.problem


# ---------------------------------------------------------------------------
# the checks beside the Jacobian check, and the advice for large models


def test_a_pattern_that_fits_gives_no_warning_on_either_path():
    for nodes in (50, 200):  # 100 states: every entry; 400: by column groups
        model = pattern_model(
            nodes,
            jacobian="test_sparse_eigen:brusselator_jacobian",
            jacobian_pattern="test_jacobian_pattern:brusselator_pattern",
        )
        x = brusselator.uniform_state(nodes, 1.97) + 0.01 * np.cos(np.arange(2 * nodes))
        assert check_pattern(model, x, model.defaults) == []


@pytest.mark.parametrize("nodes", [50, 200], ids=["every-entry", "by-groups"])
def test_a_user_jacobian_outside_a_pattern_that_misses_f_is_warned_about(nodes):
    model = pattern_model(
        nodes,
        jacobian="test_sparse_eigen:brusselator_jacobian",
        jacobian_pattern="test_jacobian_pattern:pattern_missing_diffusion",
    )
    x = brusselator.uniform_state(nodes, 1.97)
    outside, missed = check_pattern(model, x, model.defaults)
    assert "test_sparse_eigen:brusselator_jacobian has" in outside
    assert "nonzero entries outside model.python.jacobian_pattern" in outside
    assert "misses nonzeros of f" in missed
    # the first missed entry named is a diffusion coupling, with its value
    lap_entry = brusselator.D1 * (nodes - 1) ** 2  # d1 / h^2, doubled at the no-flux end
    assert "d f[x0] / d x1" in missed
    value = float(missed.split("d f[x0] / d x1 = ")[1].split(" ")[0])
    assert value == pytest.approx(2.0 * lap_entry, rel=1e-6)


@pytest.mark.parametrize("nodes", [50, 200], ids=["every-entry", "by-groups"])
def test_one_missed_entry_is_found_and_named(nodes):
    model = pattern_model(nodes, jacobian_pattern="test_jacobian_pattern:pattern_missing_one_entry")
    x = brusselator.uniform_state(nodes, 1.97)
    (missed,) = check_pattern(model, x, model.defaults)
    assert "d f[x3] / d x4 = " in missed
    assert "the Jacobian by grouped differences is wrong there" in missed
    h = 1.0 / (nodes - 1)
    value = float(missed.split("d f[x3] / d x4 = ")[1].split(" ")[0])
    assert value == pytest.approx(brusselator.D1 / h**2, rel=1e-6)


def test_run_warns_about_a_pattern_that_misses_entries():
    scan = python_scan(
        size=202,
        jacobian="test_sparse_eigen:brusselator_jacobian",
        jacobian_pattern="test_jacobian_pattern:pattern_missing_diffusion",
    )
    scan["trace"][0]["start"] = "test_jacobian_pattern:block_start"
    scan = scan_from_dict({**scan, "steps": {"max_points": 3}}, "chain.toml")
    result = run_scan(scan, confirm=False)
    assert any("misses nonzeros of f" in w for w in result.warnings)
    assert any("entries outside model.python.jacobian_pattern" in w for w in result.warnings)


def chain_scan(size: int, **python) -> dict:
    scan = python_scan(size=size, **python)
    scan["model"]["python"]["rhs"] = "cell_chains:brusselator_rhs"
    scan["model"]["parameters"] = {"a": 1.0, "b": 1.9, "d": 0.1}
    scan["steps"] = {"max_points": 3}
    return scan


def test_large_python_models_without_jacobian_or_pattern_are_told_the_cost():
    result = run_scan(scan_from_dict(chain_scan(202), "chain.toml"), confirm=False)
    (advice,) = [w for w in result.warnings if "neither model.python.jacobian" in w]
    assert "202 states" in advice and "404 calls of f" in advice
    assert 'jacobian_pattern = "module:function"' in advice
    # with a pattern, or at 200 states, no such advice
    with_pattern = chain_scan(202, jacobian_pattern="test_jacobian_pattern:chain_pattern")
    result = run_scan(scan_from_dict(with_pattern, "chain.toml"), confirm=False)
    assert not [w for w in result.warnings if "neither model.python.jacobian" in w]
    assert result.branches[0].status in ("done", "max_points"), result.branches[0].message
    small = build_model(scan_from_dict(chain_scan(200), "chain.toml").model, "chain.toml")
    assert difference_jacobian_warning(small) == ""


def test_the_command_line_refuses_a_bad_pattern_with_exit_2_and_writes_nothing(
    tmp_path, capsys, monkeypatch
):
    from branchline.cli import main

    monkeypatch.chdir(tmp_path)
    (tmp_path / "pattern_cli_model.py").write_text(
        "import numpy as np\n"
        "import scipy.sparse as sp\n"
        "def rhs(x, p):\n"
        "    return p['k'] - x\n"
        "def pattern(size):\n"
        "    return sp.eye(size + 1)\n"
    )
    scan = tmp_path / "bad.toml"
    scan.write_text(
        "[model.parameters]\nk = 1.0\n"
        '[model.python]\nrhs = "pattern_cli_model:rhs"\nsize = 3\n'
        'jacobian_pattern = "pattern_cli_model:pattern"\n'
        '[[trace]]\nvary = "k"\ninterval = [0.0, 2.0]\nstart = { x0 = 1.0, x1 = 1.0, x2 = 1.0 }\n'
    )
    out = tmp_path / "out"
    code = main(["run", str(scan), "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert "bad.toml" in err and "model.python.jacobian_pattern" in err
    assert "shape (4, 4); expected (3, 3)" in err
    assert "Traceback" not in err
    assert not out.exists()
