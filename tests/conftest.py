import atexit
import os
import shutil
import tempfile

import numpy as np
import pytest

os.environ.setdefault("OMP_NUM_THREADS", "1")
# Tests never touch the user's caches: stopwise's processed-problem cache and openml's
# cache live in a temporary folder for the whole session (set before openml is imported,
# which reads OPENML_CACHE_DIR once).
_SESSION_TMP = tempfile.mkdtemp(prefix="stopwise-tests-")
atexit.register(shutil.rmtree, _SESSION_TMP, True)
os.environ["STOPWISE_CACHE"] = os.path.join(_SESSION_TMP, "stopwise-cache")
os.environ["OPENML_CACHE_DIR"] = os.path.join(_SESSION_TMP, "openml-cache")


@pytest.fixture
def root(tmp_path):
    """A fresh results root."""
    return tmp_path / "results"


# ---------------------------------------------------------------- OpenML cache built by the tests
#
# openml's cache layout (openml 0.15): <root>/org/openml/www/datasets/<id>/{description.xml,
# dataset_<id>.pq, features.xml} and <root>/org/openml/www/tasks/<id>/{task.xml,
# datasplits.arff}. The tests write these files themselves from data that scikit-learn
# ships, keep them read-only, and copy them into a fresh cache before each use (openml
# deletes a dataset's cache folder when a call on it fails).
#
# openml keeps no copy of benchmark suites or of run evaluations; stopwise keeps its own
# (<root>/org/openml/www/stopwise/suites/<id>.json, .../evaluations/<task>.json). The
# fixture writes those through the functions `stopwise datasets fetch` uses, from the
# openml package's own objects (OpenMLBenchmarkSuite, OpenMLEvaluation): a suite of the
# three tasks below, and as the "uploaded runs" of each task three scikit-learn estimators
# scored on the task's folds (a scenario of our own making, not OpenML's numbers).

OML_DIABETES, OML_IRIS, OML_TASK_DIABETES, OML_TASK_IRIS = 900001, 900002, 900011, 900012
OML_CANCER, OML_TASK_CANCER = 900003, 900013
OML_SUITE, OML_SUITE_ALIAS = 900021, "lakeside-bench"


def _description(did, name, target):
    return (f'<oml:data_set_description xmlns:oml="http://openml.org/openml">'
            f"<oml:id>{did}</oml:id><oml:name>{name}</oml:name><oml:version>1</oml:version>"
            f"<oml:format>arff</oml:format><oml:url>http://127.0.0.1:9/{did}.arff</oml:url>"
            f"<oml:parquet_url>http://127.0.0.1:9/{did}.pq</oml:parquet_url>"
            f"<oml:default_target_attribute>{target}</oml:default_target_attribute>"
            f"</oml:data_set_description>")


def _features(columns, nominal):
    parts = []
    for i, c in enumerate(columns):
        if c in nominal:
            vals = "".join(f"<oml:nominal_value>{v}</oml:nominal_value>" for v in nominal[c])
            kind = "nominal"
        else:
            vals, kind = "", "numeric"
        parts.append(f"<oml:feature><oml:index>{i}</oml:index><oml:name>{c}</oml:name>"
                     f"<oml:data_type>{kind}</oml:data_type>{vals}"
                     f"<oml:number_of_missing_values>0</oml:number_of_missing_values></oml:feature>")
    return f'<oml:data_features xmlns:oml="http://openml.org/openml">{"".join(parts)}</oml:data_features>'


def _task(tid, did, target, type_id, type_name, repeats, folds):
    return (f'<oml:task xmlns:oml="http://openml.org/openml"><oml:task_id>{tid}</oml:task_id>'
            f"<oml:task_type_id>{type_id}</oml:task_type_id><oml:task_type>{type_name}</oml:task_type>"
            f'<oml:input name="source_data"><oml:data_set><oml:data_set_id>{did}</oml:data_set_id>'
            f"<oml:target_feature>{target}</oml:target_feature></oml:data_set></oml:input>"
            f'<oml:input name="estimation_procedure"><oml:estimation_procedure><oml:id>1</oml:id>'
            f"<oml:type>crossvalidation</oml:type><oml:data_splits_url>http://127.0.0.1:9/{tid}.arff"
            f'</oml:data_splits_url><oml:parameter name="number_repeats">{repeats}</oml:parameter>'
            f'<oml:parameter name="number_folds">{folds}</oml:parameter>'
            f"</oml:estimation_procedure></oml:input></oml:task>")


def _splits_arff(folds):
    """``folds``: {(repeat, fold): (train_rows, test_rows)} in OpenML's split-file format."""
    lines = ["@RELATION splits", "@ATTRIBUTE type {TRAIN,TEST}", "@ATTRIBUTE rowid NUMERIC",
             "@ATTRIBUTE repeat NUMERIC", "@ATTRIBUTE fold NUMERIC", "@DATA"]
    for (r, f), (tr, te) in sorted(folds.items()):
        lines += [f"TRAIN,{i},{r},{f}" for i in tr] + [f"TEST,{i},{r},{f}" for i in te]
    return "\n".join(lines) + "\n"


def task_folds():
    """The folds the tests write: KFold(5) on diabetes, RepeatedKFold(3 folds, 2 repeats) on iris
    (scikit-learn's splitters, seeded)."""
    from sklearn.model_selection import KFold, RepeatedKFold

    diab = {(0, f): (tr, te) for f, (tr, te) in enumerate(KFold(5, shuffle=True, random_state=0).split(range(442)))}
    iris = {}
    for i, (tr, te) in enumerate(RepeatedKFold(n_splits=3, n_repeats=2, random_state=0).split(range(150))):
        iris[(i // 3, i % 3)] = (tr, te)
    cancer = {(0, f): (tr, te) for f, (tr, te) in enumerate(KFold(3, shuffle=True, random_state=1).split(range(569)))}
    return {OML_TASK_DIABETES: diab, OML_TASK_IRIS: iris, OML_TASK_CANCER: cancer}


def published_runs():
    """The "uploaded runs" of the test tasks: three scikit-learn estimators each, fitted on every
    training fold and scored over the predictions of all folds and repeats together, as OpenML
    scores a run. {task: [(run_id, flow_id, flow_name, {measure: value})]}."""
    from sklearn import datasets
    from sklearn.linear_model import LogisticRegression, Ridge
    from sklearn.metrics import accuracy_score, roc_auc_score
    from sklearn.neighbors import KNeighborsClassifier, KNeighborsRegressor
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

    folds = task_folds()
    data = {OML_TASK_DIABETES: datasets.load_diabetes(return_X_y=True),
            OML_TASK_IRIS: datasets.load_iris(return_X_y=True),
            OML_TASK_CANCER: datasets.load_breast_cancer(return_X_y=True)}
    flows = {OML_TASK_DIABETES: [("sklearn.linear_model.Ridge", lambda: Ridge(alpha=1.0)),
                                 ("sklearn.neighbors.KNeighborsRegressor", lambda: KNeighborsRegressor(10)),
                                 ("sklearn.tree.DecisionTreeRegressor", lambda: DecisionTreeRegressor(max_depth=3, random_state=0))]}
    cls = [("sklearn.pipeline(StandardScaler,LogisticRegression)",
            lambda: make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))),
           ("sklearn.neighbors.KNeighborsClassifier", lambda: KNeighborsClassifier(5)),
           ("sklearn.tree.DecisionTreeClassifier", lambda: DecisionTreeClassifier(max_depth=2, random_state=0))]
    flows[OML_TASK_IRIS] = flows[OML_TASK_CANCER] = cls
    out = {}
    run_id = 7000
    for tid, (X, y) in data.items():
        runs = []
        for flow_id, (name, make) in enumerate(flows[tid], start=100):
            truth, pred, proba = [], [], []
            for (_, _), (tr, te) in sorted(folds[tid].items()):
                m = make().fit(X[tr], y[tr])
                truth.append(y[te])
                pred.append(m.predict(X[te]))
                if hasattr(m, "predict_proba"):
                    proba.append(m.predict_proba(X[te]))
            t, p = np.concatenate(truth), np.concatenate(pred)
            if tid == OML_TASK_DIABETES:
                scores = {"root_mean_squared_error": float(np.sqrt(np.mean((t - p) ** 2)))}
            else:
                pr = np.concatenate(proba)
                auc = roc_auc_score(t, pr[:, 1]) if pr.shape[1] == 2 else \
                    roc_auc_score(t, pr, multi_class="ovr", average="weighted")
                scores = {"predictive_accuracy": float(accuracy_score(t, p)), "area_under_roc_curve": float(auc)}
            run_id += 1
            runs.append((run_id, flow_id, name, scores))
        out[tid] = runs
    return out


def write_published(root, task_id, runs):
    """The summary `stopwise datasets fetch` keeps for a task, from openml.evaluations.OpenMLEvaluation
    objects holding ``runs`` (as published_runs gives them)."""
    import openml
    from openml.evaluations import OpenMLEvaluation

    from stopwise.data.openml_scores import MEASURES, scores_record, store_scores, summarize

    kind = "regression" if task_id == OML_TASK_DIABETES else "classification"
    summaries = []
    for measure in MEASURES[kind]:
        evals = [OpenMLEvaluation(run_id=r, task_id=task_id, setup_id=r, flow_id=f, flow_name=n, data_id=0,
                                  data_name="", function=measure, upload_time="2024-01-01 00:00:00", uploader=1,
                                  uploader_name="test", value=sc[measure], values=None)
                 for r, f, n, sc in runs]
        summaries.append(summarize(((e.value, e.run_id, e.flow_id, e.flow_name) for e in evals), measure))
    old = openml.config._root_cache_directory
    openml.config.set_root_cache_directory(root)
    try:
        store_scores(scores_record(task_id, kind, summaries))
    finally:
        openml.config.set_root_cache_directory(old)


def write_suite(root):
    """The suite record `stopwise datasets fetch --suite` keeps, from an OpenMLBenchmarkSuite."""
    import openml
    from openml.study import OpenMLBenchmarkSuite

    from stopwise.data.openml_suite import store_suite

    suite = OpenMLBenchmarkSuite(suite_id=OML_SUITE, alias=OML_SUITE_ALIAS, name="Lakeside clinic test bench",
                                 description="three small tasks", status="active", creation_date="2024-01-01",
                                 creator=1, tags=None, data=[OML_IRIS, OML_DIABETES, OML_CANCER],
                                 tasks=[OML_TASK_IRIS, OML_TASK_DIABETES, OML_TASK_CANCER])
    old = openml.config._root_cache_directory
    openml.config.set_root_cache_directory(root)
    try:
        return store_suite(suite)
    finally:
        openml.config.set_root_cache_directory(old)


def _write(path, text):
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)


@pytest.fixture(scope="session")
def openml_fixture(tmp_path_factory):
    """A read-only OpenML cache root holding diabetes and iris (datasets and tasks)."""
    import pandas as pd
    from sklearn import datasets

    root = tmp_path_factory.mktemp("openml-fixture")
    cancer_b = datasets.load_breast_cancer(as_frame=True)
    cancer = cancer_b.data.copy()
    cancer["diagnosis"] = pd.Categorical([cancer_b.target_names[i] for i in cancer_b.target],
                                         categories=list(cancer_b.target_names))
    www = root / "org" / "openml" / "www"
    diab = datasets.load_diabetes(scaled=False, as_frame=True).frame
    iris_b = datasets.load_iris(as_frame=True)
    iris = iris_b.data.copy()
    iris["class"] = pd.Categorical([iris_b.target_names[i] for i in iris_b.target], categories=list(iris_b.target_names))
    for did, name, df, target, nominal in [
            (OML_DIABETES, "diabetes-copy", diab, "target", {}),
            (OML_IRIS, "iris-copy", iris, "class", {"class": list(iris_b.target_names)}),
            (OML_CANCER, "breast-cancer-copy", cancer, "diagnosis", {"diagnosis": list(cancer_b.target_names)})]:
        d = www / "datasets" / str(did)
        d.mkdir(parents=True)
        df.to_parquet(d / f"dataset_{did}.pq")
        _write(d / "description.xml", _description(did, name, target))
        _write(d / "features.xml", _features(list(df.columns), nominal))
    folds = task_folds()
    _write(www / "tasks" / str(OML_TASK_DIABETES) / "task.xml",
           _task(OML_TASK_DIABETES, OML_DIABETES, "target", 2, "Supervised Regression", 1, 5))
    _write(www / "tasks" / str(OML_TASK_DIABETES) / "datasplits.arff", _splits_arff(folds[OML_TASK_DIABETES]))
    _write(www / "tasks" / str(OML_TASK_IRIS) / "task.xml",
           _task(OML_TASK_IRIS, OML_IRIS, "class", 1, "Supervised Classification", 2, 3))
    _write(www / "tasks" / str(OML_TASK_IRIS) / "datasplits.arff", _splits_arff(folds[OML_TASK_IRIS]))
    _write(www / "tasks" / str(OML_TASK_CANCER) / "task.xml",
           _task(OML_TASK_CANCER, OML_CANCER, "diagnosis", 1, "Supervised Classification", 1, 3))
    _write(www / "tasks" / str(OML_TASK_CANCER) / "datasplits.arff", _splits_arff(folds[OML_TASK_CANCER]))
    write_suite(root)
    for tid, runs in published_runs().items():
        write_published(root, tid, runs)
    for p in sorted(root.rglob("*"), reverse=True):
        p.chmod(0o555 if p.is_dir() else 0o444)
    return root


def _copy_tree(src, dst):
    """Copy files without their read-only modes (so openml can add its own derived files)."""
    for dirpath, _, files in os.walk(src):
        rel = os.path.relpath(dirpath, src)
        os.makedirs(os.path.join(dst, rel), exist_ok=True)
        for f in files:
            shutil.copyfile(os.path.join(dirpath, f), os.path.join(dst, rel, f))


@pytest.fixture
def no_network(monkeypatch):
    """Every name lookup and socket connection fails at once: the test runs as if offline."""
    import socket

    def refuse(*args, **kwargs):
        raise OSError("network disabled in tests")

    monkeypatch.setattr(socket, "getaddrinfo", refuse)
    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)


@pytest.fixture
def openml_cache(openml_fixture, tmp_path, monkeypatch, no_network):
    """A fresh copy of the test-built OpenML cache, configured as openml's cache
    (``openml.config.set_root_cache_directory`` and ``OPENML_CACHE_DIR`` for subprocesses)."""
    import openml

    root = tmp_path / "openml-cache"
    _copy_tree(openml_fixture, root)
    old = openml.config._root_cache_directory
    openml.config.set_root_cache_directory(root)
    monkeypatch.setattr(openml.config, "connection_n_retries", 1)
    monkeypatch.setenv("OPENML_CACHE_DIR", str(root))
    yield root
    openml.config.set_root_cache_directory(old)


@pytest.fixture
def problem_cache(tmp_path, monkeypatch):
    """A fresh, empty processed-problem cache for this test (and no in-process memo), which
    stores every problem however quickly it builds (STOPWISE_CACHE_MIN_SECONDS=0)."""
    from stopwise import data

    d = tmp_path / "problem-cache"
    monkeypatch.setenv("STOPWISE_CACHE", str(d))
    monkeypatch.setenv("STOPWISE_CACHE_MIN_SECONDS", "0")
    data._CACHE.clear()
    yield d
    data._CACHE.clear()


# Property tests draw the same examples on every run (CI must not flake on a rare draw);
# `pytest --hypothesis-seed=N` or HYPOTHESIS_PROFILE=explore widens the search by hand.
try:
    from hypothesis import settings as _hsettings

    _hsettings.register_profile("repeatable", derandomize=True, deadline=None)
    _hsettings.register_profile("explore", deadline=None)
    _hsettings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))
except ImportError:  # hypothesis is a test extra
    pass
