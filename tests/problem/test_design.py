"""Sparse (CSR) designs on the Problem: ||X||_2, row norms, Gram matrices and the Hessian's
range against numpy on the dense form of the same matrix (numpy.linalg.norm(X, 2) is
LAPACK's SVD; eigvalsh is LAPACK's syevd), and the bounded dense copy."""
import numpy as np
import pytest
import scipy.sparse as sp

from stopwise.problem import design
from stopwise.problem.design import DesignError, limit_dense_bytes
from stopwise.problem.problem import Problem, TrainingSet


def random_csr(n, d, density, seed):
    rng = np.random.default_rng(seed)
    return sp.random(n, d, density=density, format="csr", random_state=rng,
                     data_rvs=rng.standard_normal).astype(np.float64)


def sparse_problem(n=120, d=30, density=0.1, seed=0, task="regression"):
    X = random_csr(n, d, density, seed)
    rng = np.random.default_rng(seed + 1)
    y = rng.standard_normal(n) if task == "regression" else np.where(rng.random(n) < 0.5, -1.0, 1.0)
    a, b = int(0.6 * n), int(0.8 * n)
    return Problem(name="csr", task=task, X_train=X[:a], y_train=y[:a], X_val=X[a:b], y_val=y[a:b],
                   X_test=X[b:], y_test=y[b:])


def dense_twin(p):
    return Problem(name=p.name, task=p.task, X_train=p.X_train.toarray(), y_train=p.y_train,
                   X_val=p.X_val.toarray(), y_val=p.y_val, X_test=p.X_test.toarray(), y_test=p.y_test)


@pytest.mark.parametrize("shape,density", [((300, 40), 0.05), ((40, 300), 0.05), ((500, 200), 0.01),
                                           ((64, 64), 0.5)])
def test_svds_norm_equals_numpys_two_norm_of_the_dense_matrix(shape, density):
    """Reference: numpy.linalg.norm(X.toarray(), 2) (the largest singular value, LAPACK gesdd)."""
    X = random_csr(*shape, density, seed=shape[0])
    ref = np.linalg.norm(X.toarray(), 2)
    assert design.sparse_norm2(X) == pytest.approx(ref, rel=1e-12)
    assert design.spectral_norm_sq(X) == pytest.approx(ref ** 2, rel=1e-12)


def test_above_the_gram_size_a_sparse_problem_takes_svds_not_a_dense_svd(monkeypatch):
    from stopwise.problem import problem as problem_module

    p = sparse_problem(n=400, d=150, density=0.05)
    monkeypatch.setattr(problem_module, "SPECTRUM_GRAM_MAX", 10)
    called = []
    real = design.sparse_norm2
    monkeypatch.setattr(design, "sparse_norm2", lambda X: called.append(X.shape) or real(X))
    ref = np.linalg.norm(p.X_train.toarray(), 2) ** 2
    assert p.train_norm2_sq == pytest.approx(ref, rel=1e-12)
    assert called == [p.X_train.shape]


def test_problem_quantities_equal_those_of_the_dense_twin():
    """Row norms, ||X||_2^2, Gram matrices, the Hessian's range and L: the dense problem's
    values (themselves checked against closed forms in tests/data/test_data.py)."""
    for n, d in ((120, 30), (30, 80)):
        p = sparse_problem(n=n, d=d, density=0.2, seed=n)
        q = dense_twin(p)
        assert p.sparse and not q.sparse
        assert p.train_norm2_sq == pytest.approx(q.train_norm2_sq, rel=1e-13)
        assert p.training.L == pytest.approx(q.training.L, rel=1e-13)
        np.testing.assert_allclose(design.row_norms_sq(p.X_train), np.einsum("ij,ij->i", q.X_train, q.X_train),
                                   rtol=1e-14)
        assert p.training.row_norm_max2 == pytest.approx(q.training.row_norm_max2, rel=1e-14)
        np.testing.assert_allclose(p.gram_matrix("val"), q.gram_matrix("val"), rtol=1e-13, atol=1e-13)
        assert isinstance(p.gram_matrix("train"), np.ndarray)
        np.testing.assert_allclose(p.training.hessian_range, q.training.hessian_range, rtol=1e-10, atol=1e-14)


def test_row_norms_of_a_matrix_with_empty_rows():
    X = sp.csr_matrix(np.array([[0.0, 0.0], [3.0, 4.0], [0.0, 0.0], [0.0, 2.0], [0.0, 0.0]]))
    assert design.row_norms_sq(X).tolist() == [0.0, 25.0, 0.0, 4.0, 0.0]


def test_a_sparse_problem_is_read_only_and_rejects_mixed_designs():
    p = sparse_problem()
    for X in (p.X_train, p.X_val, p.X_test):
        assert not (X.data.flags.writeable or X.indices.flags.writeable or X.indptr.flags.writeable)
    with pytest.raises(TypeError, match="sparse like X_train"):
        Problem(name="mixed", task="regression", X_train=p.X_train, y_train=p.y_train, X_val=p.X_val.toarray(),
                y_val=p.y_val, X_test=p.X_test, y_test=p.y_test)


def test_a_problem_refuses_a_csr_matrix_with_duplicate_entries():
    X = sp.csr_matrix((np.array([1.0, 2.0]), np.array([1, 1]), np.array([0, 2, 2])), shape=(2, 2))
    with pytest.raises(TypeError, match="without duplicates"):
        Problem(name="dup", task="regression", X_train=X, y_train=np.zeros(2), X_val=X, y_val=np.zeros(2),
                X_test=X, y_test=np.zeros(2))
    assert design.as_csr(X).toarray().tolist() == [[0.0, 3.0], [0.0, 0.0]]


def test_the_dense_copy_is_made_once_and_refused_above_the_bound():
    p = sparse_problem()
    q = p.dense("solver 'kaczmarz'")
    assert not q.sparse and np.array_equal(q.X_train, p.X_train.toarray()) and p.dense("x") is q
    fresh = sparse_problem()
    with limit_dense_bytes(1000):
        with pytest.raises(DesignError) as e:
            fresh.dense("solver 'kaczmarz'")
    msg = str(e.value)
    assert len(msg.splitlines()) == 1
    assert "solver 'kaczmarz'" in msg and "120 x 30" in msg and "design=dense" in msg and "gd, nesterov" in msg
    assert not fresh.dense_copies


def test_densify_refuses_in_one_line_and_returns_dense_input_unchanged():
    X = random_csr(50, 40, 0.1, 3)
    with limit_dense_bytes(8 * 50 * 40 - 1):
        with pytest.raises(DesignError, match=r"50 x 40 sparse design"):
            design.densify(X, "here", "choose otherwise")
    with limit_dense_bytes(8 * 50 * 40):
        assert np.array_equal(design.densify(X, "here"), X.toarray())
    A = np.ones((2, 2))
    assert design.densify(A, "here") is A


def test_training_set_of_a_sparse_problem_is_sparse():
    p = sparse_problem()
    assert isinstance(p.training, TrainingSet) and p.training.sparse and p.training.X is p.X_train
