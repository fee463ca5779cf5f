"""Typed config schemas, validation into a RunSpec, and the run hash.

The schemas are registered in Hydra's ConfigStore under ``schema/`` (never inside a
group that users sweep with ``glob(*)``). A composed config becomes a :class:`RunSpec`
through :func:`spec_from_config`, which checks every value against the constraints that
the solver and source params declare, and raises :class:`SpecError` with one line.
"""
from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Dict, Iterable, List, Optional

from stopwise.data import DataError, dataset_row_order, dataset_task, normalize_dataset, split_rows  # noqa: F401
from stopwise.data.split import SPLIT_KINDS
from stopwise.solvers import SOLVERS, get_solver
from stopwise.core.params import Choice, Flag, Interval, ParamError, field_types, make_params, params_data, stored_names
from stopwise.solvers.base import UnknownSolver
from stopwise.stopping.residual import NEEDS_RESIDUAL, NEEDS_SIGNAL_ROWS
from stopwise.stopping.rules import RULES, RuleError, get_rule, normalize_stopping

TRACE_FORMAT = 2  # 2: residual statistics from the split statistics; ncp_distance on signal rows only

# Keys common to every solver config: a solver without a step size ignores step_scale,
# and an ignored key never enters the run identity (so a sweep over step scales runs
# CGLS once).
COMMON_SOLVER_KEYS = ("step_scale",)


from stopwise.core.errors import SpecError  # noqa: E402,F401  (re-exported)

# Former spellings of solver keys: one name for one idea across solvers. A former name is
# refused with a line that names the new one.
RENAMED_SOLVER_KEYS = {"batch_size": "batch"}


class TaskMismatch(SpecError):
    """A solver that does not handle the dataset's task (a sweep leaves such pairs out)."""

    def __init__(self, message: str, solver: str, dataset: str, task: str):
        super().__init__(message)
        self.solver, self.dataset, self.task = solver, dataset, task



class TraceTooLarge(SpecError):
    """A budget whose trace cannot fit in this machine's memory."""


ROW_BYTES = 8 * 32  # a recorded row holds at most about 32 columns of 8 bytes (docs/schema.md)


@functools.lru_cache(maxsize=1)
def memory_bytes() -> int:
    """This machine's memory, or the process's control-group limit when that is lower."""
    import os

    total = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    for limit_file in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(limit_file).read_text().strip()
        except OSError:
            continue
        if text.isdigit() and 0 < int(text) < total:
            total = int(text)
    return int(total)


def trace_rows_bound(budget: dict, record: dict, n_train: int | None = None) -> int:
    """The most rows a run with this budget and record schedule can record: every step
    costs at least one per-sample gradient (1 / n_train data passes), so ``budget.passes``
    caps the steps once ``n_train`` is known; ``record.every`` or ``record.per_pass`` then
    caps the rows (the initial and the last iterate are always recorded).

    >>> trace_rows_bound({"iterations": 10**11, "passes": 1.0}, {"every": 1}, n_train=300)
    303
    >>> trace_rows_bound({"iterations": 1000, "passes": None}, {"every": 10})
    102
    >>> trace_rows_bound({"iterations": 10**9, "passes": 20.0}, {"every": 1, "per_pass": 8})
    163
    """
    steps = int(budget["iterations"])
    passes = budget.get("passes")
    if passes is not None and n_train:
        steps = min(steps, math.ceil(float(passes) * int(n_train)) + 1)
    per_pass = record.get("per_pass")
    if per_pass is None:
        return steps // int(record.get("every", 1)) + 2
    if passes is None:
        return steps + 2
    return min(steps, math.floor(float(per_pass) * float(passes)) + 1) + 2


def check_trace_fits(budget: dict, record: dict, n_train: int | None = None) -> None:
    """Refuse (one line) a budget whose trace cannot fit in half of this machine's memory.
    Without ``n_train`` a pass budget cannot be turned into a step count, so a budget with
    ``passes`` is then checked only through ``record.per_pass``."""
    if n_train is None and budget.get("passes") is not None and record.get("per_pass") is None:
        return
    rows = trace_rows_bound(budget, record, n_train)
    need, have = rows * ROW_BYTES, memory_bytes() // 2
    if need <= have:
        return
    sched = (f"record.per_pass={record['per_pass']:g}" if record.get("per_pass") is not None
             else f"record.every={record.get('every', 1)}")
    passes = budget.get("passes")
    raise TraceTooLarge(
        f"budget.iterations={budget['iterations']} with "
        + (f"budget.passes={passes:g}, " if passes is not None else "")
        + f"{sched} can record {rows} rows (about {_size(need)}), more than half this machine's memory "
          f"({_size(2 * have)}): record less often (record.every, record.per_pass), set budget.passes, "
          "or lower budget.iterations")


def _size(n: float) -> str:
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if n < 1024 or unit == "PiB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} PiB"


def solver_keys(name: str) -> set[str]:
    """The keys a ``solver.`` override may set for solver ``name`` (its params and the
    common keys); empty for an unknown solver."""
    try:
        d = get_solver(name)
    except UnknownSolver:
        return set()
    return {f.name for f in dataclasses.fields(d.params)} | set(COMMON_SOLVER_KEYS)


# ---------------------------------------------------------------- schemas (Hydra ConfigStore)

@dataclass
class RandomFeaturesConfig:
    """Optional random-features map (off while ``kind`` is null); see docs/datasets.md."""

    kind: Optional[str] = None
    n_components: int = 256
    gamma: Optional[float] = None
    seed: int = 0


@dataclass
class DatasetConfig:
    name: str = "diabetes"
    source: str = "sklearn"
    params: Dict[str, Any] = field(default_factory=dict)
    features: Optional[List[str]] = None
    standardize: bool = True
    center_target: bool = True
    drop_features: Optional[List[str]] = None
    categorical: Optional[List[str]] = None
    missing: str = "impute"
    drop_constant: bool = True
    random_features: RandomFeaturesConfig = field(default_factory=RandomFeaturesConfig)
    center_features: bool = False  # without standardize: subtract training means only
    loss: Optional[str] = None       # classification: logistic | hinge | softmax | squares; null = task default
    add_constant: bool = False       # append a column of ones after standardization


@dataclass
class SplitConfig:
    kind: str = "random"
    test: float = 0.2
    val: float = 0.2
    train_rows: Optional[List[int]] = None
    val_rows: Optional[List[int]] = None
    test_rows: Optional[List[int]] = None
    fold: int = 0
    repeat: int = 0


@dataclass
class BudgetConfig:
    iterations: int = 500
    passes: Optional[float] = None
    diverge_factor: float = 1e10


@dataclass
class RecordConfig:
    every: int = 1
    per_pass: Optional[float] = None  # rows per data pass; replaces `every` when set
    residual: bool = True  # regression: record the residual statistics (see stopwise.stopping.residual)


@dataclass
class StoppingConfig:
    rule: str = "budget"
    halt: bool = False
    params: Dict[str, Any] = field(default_factory=dict)


@dataclass
class StopwiseConfig:
    dataset: DatasetConfig = field(default_factory=DatasetConfig)
    solver: Any = None
    split: SplitConfig = field(default_factory=SplitConfig)
    budget: BudgetConfig = field(default_factory=BudgetConfig)
    record: RecordConfig = field(default_factory=RecordConfig)
    stopping: Any = None  # a schema/stopping/<rule> node (conf/stopping/*.yaml select one)
    seed: int = 0
    results_root: str = "results"
    campaign_id: Optional[str] = None
    threads: Optional[int] = None  # BLAS/OpenMP threads per run (not identity); see docs/cluster.md


def halt_needs_signal_rows(rule: str, column: str, dataset_name: Any) -> str:
    """The one-line error for halting on a rule whose column is recorded only on signal-ordered rows."""
    return (f"stopping.rule={rule} with halt needs {column}, which is recorded only when the training "
            f"rows are in signal order; dataset {dataset_name!r} has exchangeable rows (a file source "
            "can declare dataset.params.row_order=signal)")


def halt_missing_column(rule: str, column: str, dataset_name: Any) -> str:
    """The one-line error for halting on a rule whose column a problem's traces lack."""
    if column in NEEDS_SIGNAL_ROWS:
        return halt_needs_signal_rows(rule, column, dataset_name)
    return f"stopping.rule={rule} with halt needs {column}, which runs on dataset {dataset_name!r} do not record"

# numeric constraints of the fixed schemas, as data (read by validation and by tests)
FIELD_CONSTRAINTS: dict[str, Interval | Choice] = {
    "split.kind": Choice(SPLIT_KINDS),
    "budget.iterations": Interval(1, None, integer=True),
    "budget.passes": Interval(0.0, None, low_closed=False),
    "budget.diverge_factor": Interval(1.0, None, low_closed=False),
    "record.every": Interval(1, None, integer=True),
    "record.per_pass": Interval(0.0, None, low_closed=False),
    "record.residual": Flag(),
    "split.test": Interval(0.0, None),
    "split.val": Interval(0.0, None),
    "split.fold": Interval(0, None, integer=True),
    "split.repeat": Interval(0, None, integer=True),
    "seed": Interval(0, 2**32 - 1, integer=True),
    "threads": Interval(1, None, integer=True),
}

# Names that end up in file or folder names under a results root: no separators, no
# leading dot, so nothing named in a config can reach outside the root.
SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$")


def check_results_root(value: Any) -> str:
    """A results root is a plain, non-empty path string (no NUL or line breaks)."""
    if not isinstance(value, str) or not value.strip():
        raise SpecError(f"results_root={value!r} is invalid: must be a non-empty folder path")
    if any(ch in value for ch in "\0\n\r"):
        raise SpecError(f"results_root={value!r} is invalid: a path may not contain NUL or line breaks")
    return value


def check_campaign_id(value: Any) -> Optional[str]:
    if value is None:
        return None
    if not isinstance(value, str) or not SAFE_NAME.match(value):
        raise SpecError(f"campaign_id={value!r} is invalid: letters, digits, '_' and '-' only "
                        "(it is set by stopwise sweep)")
    return value


def params_schema(params: type, name: str) -> type:
    """A Hydra schema of a params dataclass: its fields, types and defaults (no constraints)."""
    types = field_types(params)
    return dataclasses.make_dataclass(name, [(f.name, types[f.name], dataclasses.field(default=f.default))
                                             for f in dataclasses.fields(params)])


def stopping_schema(name: str) -> type:
    """The Hydra schema of one stopping rule: ``rule``, ``halt`` and its params with their defaults."""
    params = params_schema(get_rule(name).params, f"{name}_stopping_params")
    return dataclasses.make_dataclass(f"{name}_stopping_config", [
        ("rule", str, dataclasses.field(default=name)),
        ("halt", bool, dataclasses.field(default=False)),
        ("params", params, dataclasses.field(default_factory=params)),
    ])


def solver_schema(name: str) -> type:
    """The Hydra schema of one solver: ``name``, the common keys, and its params."""
    d = get_solver(name)
    fields: list = [("name", str, dataclasses.field(default=name))]
    own = {f.name for f in dataclasses.fields(d.params)}
    for key in COMMON_SOLVER_KEYS:
        if key not in own:
            fields.append((key, Optional[float], dataclasses.field(default=None)))
    types = field_types(d.params)
    for f in dataclasses.fields(d.params):
        fields.append((f.name, types[f.name], dataclasses.field(default=f.default)))
    return dataclasses.make_dataclass(f"{name}_solver_config", fields)


_STORED: set[tuple[str, str]] = set()  # (group, name) already in the ConfigStore
_GENERATION = [0]  # bumped whenever the ConfigStore's stopwise entries change


def registration_generation() -> int:
    """A number that changes whenever :func:`register_configs` stores something new or
    :func:`forget_configs` drops something (cached compositions are stale then)."""
    return _GENERATION[0]


def register_configs() -> None:
    """Store the schemas in Hydra's ConfigStore: ``schema/solver/<name>`` and
    ``schema/stopping/<rule>`` for every registered solver and rule (what conf/solver and
    conf/stopping select), and ``solver/<name>`` / ``stopping/<rule>`` themselves for one
    registered without a yaml file there. Repeated calls add only what was registered since."""
    from hydra.core.config_store import ConfigStore

    cs = ConfigStore.instance()

    def put(group: str | None, name: str, node: Any, package: str | None) -> None:
        if (str(group), name) not in _STORED:
            cs.store(group=group, name=name, node=node, package=package)
            _STORED.add((str(group), name))
            _GENERATION[0] += 1

    put(None, "stopwise_schema", StopwiseConfig, None)
    put("schema/dataset", "base", DatasetConfig, "dataset")
    for kind, registry, schema in (("solver", SOLVERS, solver_schema), ("stopping", RULES, stopping_schema)):
        for name in registry:
            if (f"schema/{kind}", name) in _STORED:
                continue
            node = schema(name)
            put(f"schema/{kind}", name, node, kind)
            if not (conf_dir() / kind / f"{name}.yaml").is_file():
                put(kind, name, node, kind)


def forget_configs(kind: str, name: str) -> None:
    """Drop what :func:`register_configs` stored for solver or stopping rule ``name`` (for a
    registration that is undone, as in tests)."""
    from hydra.core.config_store import ConfigStore

    repo = ConfigStore.instance().repo
    for group in (f"schema/{kind}", kind):
        node = repo
        for part in group.split("/"):
            node = node.get(part, {})
        node.pop(f"{name}.yaml", None)
        _STORED.discard((group, name))
    _GENERATION[0] += 1


# ---------------------------------------------------------------- RunSpec

@dataclass(frozen=True)
class RunSpec:
    """Everything that changes a run's numbers, validated and typed."""

    dataset: dict
    split: dict
    solver: str
    params: Any  # the solver's validated params dataclass (plain data only in identity())
    budget: dict
    record: dict
    seed: int
    stopping: dict  # the halting rule (part of identity only when halt is true)

    def identity(self) -> dict:
        ident = {
            "format": TRACE_FORMAT,
            "dataset": self.dataset,
            "split": self.split,
            "solver": {"name": self.solver, "params": params_data(self.params)},
            "budget": self.budget,
            "record": self.record,
            "seed": self.seed,
        }
        if self.stopping.get("halt"):
            ident["halt"] = {"rule": self.stopping["rule"], "params": self.stopping.get("params", {})}
        return ident

    @functools.cached_property
    def identity_text(self) -> str:
        """The identity's canonical JSON (what the run id hashes), computed once: a spec is
        frozen. A launch writes it into the chunk files as it is."""
        return identity_json(self.identity())

    @functools.cached_property
    def digest(self) -> str:
        return hashlib.sha256(self.identity_text.encode()).hexdigest()

    @property
    def run_id(self) -> str:
        return self.digest[:16]

    def to_dict(self) -> dict:
        """The spec as plain data (what a trace's metadata stores as ``config``): the params
        as a dict, the other sections shared with the spec, not copied (read, do not modify)."""
        return {f.name: (dataclasses.asdict(self.params) if f.name == "params" else getattr(self, f.name))
                for f in dataclasses.fields(self)}

    def label(self) -> str:
        """Short human label: the solver, its step scale and every param that differs from
        the solver's default (the full params are in the trace)."""
        defaults = {f.name: f.default for f in dataclasses.fields(get_solver(self.solver).params)}
        values = {f.name: getattr(self.params, f.name) for f in dataclasses.fields(self.params)}
        shown = {k: v for k, v in values.items() if k == "step_scale" or v != defaults.get(k, v)}
        ps = " ".join(f"{k}={_fmt(v)}" for k, v in sorted(shown.items()))
        return f"{self.solver}{(' ' + ps) if ps else ''} seed={self.seed} on {self.dataset.get('name')}"


def _fmt(v: Any) -> str:
    return f"{v:g}" if isinstance(v, float) else str(v)


def identity_json(ident: dict) -> str:
    """:func:`canonical_json` of a run identity, at the cost of one ``json.dumps``: an identity
    is built from validated sections whose keys are all strings, so sorted-key JSON is
    already canonical unless it holds a ``-0.0`` (or a non-finite number, refused), in which
    case the general path gives the text (and the refusal).

    >>> ident = {"seed": 1, "budget": {"passes": None, "iterations": 5}, "params": {"step_scale": 0.5}}
    >>> identity_json(ident) == canonical_json(ident)
    True
    >>> identity_json({"w": -0.0}) == canonical_json({"w": 0.0})
    True
    """
    try:
        text = json.dumps(ident, sort_keys=True, separators=(",", ":"), allow_nan=False)
    except (TypeError, ValueError):
        return canonical_json(ident)
    return canonical_json(ident) if "-0.0" in text else text


def data_keys(specs: Iterable["RunSpec"]) -> list[str]:
    """A key per spec for what decides its problem (dataset and split sections, the seed
    aside), to group runs by: sorted-key JSON of the validated sections (plain data, so
    equal sections give equal text; four times faster than :func:`canonical_json`, which
    a sweep of 10,000 runs would pay per run). A key is never hashed into an identity.

    >>> a = RunSpec({"name": "d"}, {"kind": "random"}, "gd", None, {}, {}, 0, {})
    >>> b = RunSpec({"name": "d"}, {"kind": "random"}, "gd", None, {}, {}, 1, {})
    >>> k = data_keys([a, b]); k[0] == k[1] != data_keys([dataclasses.replace(a, dataset={"name": "e"})])[0]
    True
    """
    return [json.dumps([s.dataset, s.split], sort_keys=True, default=repr) for s in specs]


def canonical_json(obj: Any) -> str:
    """Key-order independent JSON; floats in shortest round-trip form; no NaN."""
    return json.dumps(_canon(obj), sort_keys=True, separators=(",", ":"), allow_nan=False)


def _canon(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _canon(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_canon(v) for v in obj]
    if isinstance(obj, float):
        if not math.isfinite(obj):
            raise SpecError(f"non-finite number {obj!r} in a run identity")
        return obj + 0.0  # -0.0 and 0.0 are one number: one spelling
    return obj


def _plain(cfg: Any) -> Any:
    try:
        from omegaconf import DictConfig, ListConfig, OmegaConf

        if isinstance(cfg, (DictConfig, ListConfig)):
            return OmegaConf.to_container(cfg, resolve=True)
    except ImportError:  # pragma: no cover
        pass
    return cfg


def _check(path: str, value: Any, allow_none: bool = False) -> Any:
    c = FIELD_CONSTRAINTS[path]
    if value is None and allow_none:
        return None
    if not c.contains(value):
        raise SpecError(f"{path}={value!r} is invalid: must be {c.describe()}")
    return value


def spec_from_config(cfg: Any) -> RunSpec:
    """Validate a composed config (DictConfig or plain dict) into a RunSpec, one section at a time.

    Configs that differ only in their seed validate alike (the seed is checked, and used by
    nothing else here), so the sections validated for one are reused for the others
    (:class:`_Reseed`): a sweep over thousands of seeds validates each other combination once.
    """
    c = _plain(cfg)
    if not isinstance(c, dict):
        raise SpecError("config must be a mapping")
    key = _reseed_key(c)
    hit = _RESEED.get(key) if key is not None else None
    if hit is not None and hit.current():
        return hit.spec(int(_check("seed", c.get("seed", 0))))
    spec = _validate_config(c)
    if key is not None and len(_RESEED) < 4096:
        _RESEED[key] = _Reseed(spec)
    return spec


# what spec_from_config reads besides the seed (the run options are checked, not kept)
_RESEED_KEYS = ("dataset", "split", "solver", "budget", "record", "stopping", "threads", "results_root",
                "campaign_id")


def _reseed_key(c: dict) -> str | None:
    """The config without its seed as sorted-key JSON (None when it is not plain data)."""
    try:
        return json.dumps([[k, c[k]] for k in _RESEED_KEYS if k in c], sort_keys=True, allow_nan=True)
    except (TypeError, ValueError):
        return None


def plain_copy(obj: Any) -> Any:
    """Copy of nested dicts and lists of plain values (what ``OmegaConf.to_container`` gives).

    >>> a = {"solver": {"name": "gd", "tags": [1, 2]}}
    >>> b = plain_copy(a); b["solver"]["tags"].append(3); a["solver"]["tags"], b == a
    ([1, 2], False)
    """
    if isinstance(obj, dict):
        return {k: plain_copy(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [plain_copy(v) for v in obj]
    return obj


class _Reseed:
    """A validated spec, kept to give the spec of the same config with another seed: fresh
    copies of its sections (a RunSpec owns its dicts; the params are frozen and shared) and
    its identity text with the seed put in place. Canonical JSON sorts the identity's keys,
    and the seed's neighbours are fixed (``format`` and ``record`` before it, ``solver`` and
    ``split`` after), so the text is the canonical JSON of the keys before ``seed``, the seed,
    and that of the keys after; checked against the spec's own text when the entry is made."""

    def __init__(self, spec: RunSpec):
        self.solver = SOLVERS[spec.solver]
        self.rule = RULES[spec.stopping["rule"]]
        self.sections = plain_copy({k: getattr(spec, k) for k in ("dataset", "split", "budget", "record", "stopping")})
        self.name, self.params = spec.solver, spec.params
        ident = spec.identity()
        self.head = identity_json({k: v for k, v in ident.items() if k < "seed"})[:-1] + ',"seed":'
        self.tail = "," + identity_json({k: v for k, v in ident.items() if k > "seed"})[1:]
        if self.text(spec.seed) != spec.identity_text:  # never expected: then the text is computed per spec
            self.head = self.tail = ""

    def text(self, seed: int) -> str:
        return f"{self.head}{seed}{self.tail}"

    def current(self) -> bool:
        """The solver and rule it was validated against are still the registered ones (one
        unregistered since is validated afresh, which names it as unknown)."""
        rule = self.sections["stopping"]["rule"]
        return (self.name in SOLVERS and SOLVERS[self.name] is self.solver
                and rule in RULES and RULES[rule] is self.rule)

    def spec(self, seed: int) -> RunSpec:
        spec = RunSpec(solver=self.name, params=self.params, seed=seed, **plain_copy(self.sections))
        if self.head:
            # the cached property's own storage (functools.cached_property keeps its value in
            # the instance dict, which a frozen dataclass does not guard)
            vars(spec)["identity_text"] = self.text(seed)
        return spec


_RESEED: dict[str, _Reseed] = {}  # validated specs by their config without the seed


def _validate_config(c: dict) -> RunSpec:
    for key in ("dataset", "solver"):
        if not isinstance(c.get(key), dict):
            raise SpecError(f"config has no {key}; choose one with {key}=NAME")
    dataset = _dataset_section(c["dataset"])
    split = _split_section(c.get("split"))
    name, params = _solver_section(c["solver"], dataset, c["dataset"].get("loss"))
    budget = _budget_section(c.get("budget"))
    record = _record_section(c.get("record"))
    check_trace_fits(budget, record)  # the training rows' count is checked once the data are built
    seed = int(_check("seed", c.get("seed", 0)))
    _run_options_section(c)
    stopping = _stopping_section(c.get("stopping"), record, dataset)
    return RunSpec(dataset=dataset, split=split, solver=name, params=params, budget=budget,
                   record=record, seed=seed, stopping=stopping)


def _keep(memo: dict[str, str], key: str | None, value: Any) -> None:
    """Remember a normalized section as JSON under its input's key (at most 256 per memo;
    a value that is not plain data is not kept)."""
    if key is not None and len(memo) < 256:
        try:
            memo[key] = json.dumps(value)
        except (TypeError, ValueError):
            pass


_DATASETS: dict[str, str] = {}  # normalized dataset sections by their input (a sweep repeats a few)


@functools.lru_cache(maxsize=None)
def _default_items(cls: type) -> str:
    return json.dumps(dataclasses.asdict(cls()))


def _defaults(cls: type) -> dict:
    """A fresh dict of a fixed schema's defaults (built once per class, copied per call)."""
    return json.loads(_default_items(cls))


def _dataset_section(raw: dict) -> dict:
    try:
        key = json.dumps(raw, sort_keys=True, default=repr)
    except (TypeError, ValueError):
        key = None
    hit = _DATASETS.get(key) if key is not None else None
    if hit is not None:
        return json.loads(hit)  # a fresh copy: a RunSpec owns its dict
    try:
        out = normalize_dataset(raw)
    except DataError as e:
        raise SpecError(str(e)) from None
    _keep(_DATASETS, key, out)
    return out


def _split_section(raw: dict | None) -> dict:
    split = dict(_defaults(SplitConfig), **(raw or {}))
    _check("split.kind", split["kind"])
    split["test"] = float(_check("split.test", split["test"]))
    split["val"] = float(_check("split.val", split["val"]))
    if split["test"] < 1 and split["val"] < 1 and split["test"] + split["val"] >= 1:
        raise SpecError(f"split.test + split.val = {split['test'] + split['val']:g} leaves no training rows: "
                        "fractions must sum to < 1")
    if split["kind"] != "indices":
        split["train_rows"] = split["val_rows"] = split["test_rows"] = None
    # a bad value is refused even where the key is unused (one line, exit 2), never ignored
    fold = int(_check("split.fold", split.get("fold", 0)))
    repeat = int(_check("split.repeat", split.get("repeat", 0)))
    if split["kind"] != "indices" or split["train_rows"] is not None or split["test_rows"] is not None:
        # fold and repeat pick a predefined fold (an OpenML task's); elsewhere they change
        # nothing, so they stay out of the run identity
        split.pop("fold", None)
        split.pop("repeat", None)
    else:
        split["fold"], split["repeat"] = fold, repeat
    return split


_PARAMS: dict[str, Any] = {}   # validated params (frozen, so shared) by solver section and dataset task
_TASKS: dict[str, Any] = {}    # dataset_task by normalized dataset section


def _solver_section(raw: dict, dataset: dict, asked_loss: Any) -> tuple[str, Any]:
    solver_cfg = dict(raw)
    name = solver_cfg.pop("name", None)
    try:
        sdef = get_solver(name)
    except UnknownSolver as e:
        raise SpecError(str(e)) from None
    try:
        dkey = json.dumps(dataset, sort_keys=True)
    except (TypeError, ValueError):
        dkey = None
    if dkey is not None and dkey in _TASKS:
        task = _TASKS[dkey]
    else:
        task = dataset_task(dataset)
        if dkey is not None and len(_TASKS) < 256:
            _TASKS[dkey] = task
    try:
        pkey = json.dumps([name, solver_cfg, task, asked_loss], sort_keys=True)
    except (TypeError, ValueError):
        pkey = None
    hit = _PARAMS.get(pkey) if pkey is not None else None
    if hit is not None and type(hit) is sdef.params:  # the same registered solver
        return name, hit
    name, params = _validate_solver(name, sdef, solver_cfg, dataset, task, asked_loss)
    if pkey is not None and len(_PARAMS) < 4096:
        _PARAMS[pkey] = params
    return name, params


def _validate_solver(name: str, sdef: Any, solver_cfg: dict, dataset: dict, task: Any,
                     asked_loss: Any) -> tuple[str, Any]:
    if task is not None and task not in sdef.tasks:
        raise TaskMismatch(f"solver {name!r} does not handle {task} problems such as dataset {dataset.get('name')!r}; "
                           f"valid solvers: {', '.join(n for n, d in SOLVERS.items() if task in d.tasks)}",
                           str(name), str(dataset.get("name")), task)
    if sdef.loss is not None and asked_loss not in (None, sdef.loss):
        raise SpecError(f"dataset.loss={asked_loss!r} conflicts with solver {name!r}, which trains the "
                        f"{sdef.loss} loss; drop dataset.loss or set it to {sdef.loss!r}")
    own = {f.name for f in dataclasses.fields(sdef.params)}
    for key in COMMON_SOLVER_KEYS:
        if key not in own:
            solver_cfg.pop(key, None)
    solver_cfg = {k: v for k, v in solver_cfg.items() if not (v is None and k in own and
                  getattr(sdef.params, k, None) is not None)}
    try:
        return name, make_params(sdef.params, solver_cfg, "solver")
    except ParamError as e:
        raise SpecError(str(e)) from None


def _budget_section(raw: dict | None) -> dict:
    budget = dict(_defaults(BudgetConfig), **(raw or {}))
    budget["iterations"] = int(_check("budget.iterations", budget["iterations"]))
    if budget["passes"] is not None:
        budget["passes"] = float(_check("budget.passes", budget["passes"]))
    budget["diverge_factor"] = float(_check("budget.diverge_factor", budget["diverge_factor"]))
    return budget


def _record_section(raw: dict | None) -> dict:
    record = dict(_defaults(RecordConfig), **(raw or {}))
    keys = [f.name for f in dataclasses.fields(RecordConfig)]
    unknown = sorted(set(record) - set(keys))
    if unknown:
        raise SpecError(f"record has no key {unknown[0]!r}; valid: {', '.join(keys)}")
    record["every"] = int(_check("record.every", record["every"]))
    _check("record.residual", record["residual"])
    if record["residual"]:
        del record["residual"]  # the default is absent from the identity (runs keep their ids)
    if record["per_pass"] is None:
        del record["per_pass"]  # absent from the identity, so runs without it keep their ids
    else:
        record["per_pass"] = float(_check("record.per_pass", record["per_pass"]))
        if record["every"] != 1:
            raise SpecError(f"record.every={record['every']} and record.per_pass={record['per_pass']:g} "
                            "are exclusive: set one of them")
    return record


def _run_options_section(c: dict) -> None:
    """Keys that change no number (threads, results root, campaign id): checked, not kept."""
    if c.get("threads") is not None:
        _check("threads", c["threads"])
    if "results_root" in c:
        check_results_root(c["results_root"])
    check_campaign_id(c.get("campaign_id"))


_STOPPING: dict[str, str] = {}  # normalized stopping sections (JSON) by their input (a sweep repeats a few)


def _stopping_section(raw: dict | None, record: dict, dataset: dict) -> dict:
    try:
        key = json.dumps(raw, sort_keys=True)
    except (TypeError, ValueError):
        key = None
    hit = _STOPPING.get(key) if key is not None else None
    if hit is not None:
        stopping = json.loads(hit)  # a fresh copy: a RunSpec owns its dict
    else:
        try:
            stopping = normalize_stopping(dict(_defaults(StoppingConfig), **(raw or {})))
        except RuleError as e:
            raise SpecError(str(e)) from None
        _keep(_STOPPING, key, stopping)
    if stopping["halt"]:
        _check_halt_columns(stopping["rule"], record, dataset)
    return stopping


def _check_halt_columns(rule: str, record: dict, dataset: dict) -> None:
    """A run halting on a rule must record the columns the rule declares it reads."""
    needs = get_rule(rule).columns
    if record.get("residual") is False and any(c in NEEDS_RESIDUAL for c in needs):
        raise SpecError(f"stopping.rule={rule} with halt needs the residual columns: drop record.residual=false")
    signal = [c for c in needs if c in NEEDS_SIGNAL_ROWS]
    if signal and dataset_row_order(dataset) != "signal":
        raise SpecError(halt_needs_signal_rows(rule, signal[0], dataset.get("name")))


def _from_stored(solver: Any, params: dict) -> dict:
    """Solver params of a stored identity under the names users type (see ``stored_as``)."""
    try:
        renamed = stored_names(get_solver(solver).params)
    except UnknownSolver:
        return dict(params)
    return {renamed.get(k, k): v for k, v in params.items()}


def spec_from_identity(ident: dict) -> RunSpec:
    """Rebuild a RunSpec from a stored identity (data only: nothing is imported or called)."""
    if not isinstance(ident, dict) or ident.get("format") != TRACE_FORMAT:
        raise SpecError("stored config has an unknown trace format")
    try:
        for key in ("dataset", "split", "solver", "budget", "record"):
            if not isinstance(ident[key], dict):
                raise SpecError(f"stored config: {key} is not a mapping")
        if not isinstance(ident["solver"]["params"], dict):
            raise SpecError("stored config: solver.params is not a mapping")
        cfg = {
            "dataset": ident["dataset"], "split": ident["split"],
            "solver": dict(_from_stored(ident["solver"]["name"], ident["solver"]["params"]), name=ident["solver"]["name"]),
            "budget": ident["budget"], "record": ident["record"], "seed": ident["seed"],
        }
        if "halt" in ident:
            halt = ident["halt"]
            if not isinstance(halt, dict) or not isinstance(halt.get("params"), dict):
                raise SpecError("stored config: halt is not a mapping with params")
            cfg["stopping"] = {"rule": halt["rule"], "halt": True, "params": halt["params"]}
        return spec_from_config(cfg)
    except SpecError:
        raise
    except (KeyError, TypeError, ValueError, AttributeError) as e:
        raise SpecError(f"stored config is malformed: {type(e).__name__}: {e}") from None


# ---------------------------------------------------------------- composing with Hydra

def conf_dir() -> Path:
    """The Hydra config directory: packaged copy when installed, else the checkout's conf/."""
    here = Path(__file__).resolve().parent.parent  # the stopwise package
    packaged = here / "_conf"
    if packaged.is_dir():
        return packaged
    return here.parent.parent / "conf"


def campaigns_dir() -> Path:
    return conf_dir() / "campaign"


def group_options(group: str) -> list[str]:
    """Options of a config group: Hydra's own view when it is initialized (which includes
    plugin configs such as ``hydra/launcher``), else the yaml files under conf/."""
    try:
        from hydra.core.global_hydra import GlobalHydra

        gh = GlobalHydra.instance()
        if gh.is_initialized():
            opts = gh.config_loader().get_group_options(group)
            if opts:
                return sorted(set(opts))
    except Exception:  # an error message must never fail
        pass
    d = conf_dir() / group
    return sorted(p.stem for p in d.glob("*.yaml")) if d.is_dir() else []


def hydra_error_line(e: BaseException) -> str:
    """Turn a Hydra / OmegaConf composition error into one line."""
    msg = str(e)
    m = re.match(r"In '([^']+)': \w+ raised while composing config:\s*\n(.*?)(?:\n\s+full_key: (\S+))?(?:\n|$)", msg)
    if m:  # a value in a config file that its schema refuses: the file, the key, the reason
        where, why, key = m.group(1), m.group(2).strip(), m.group(3)
        return f"{where}: {key + ': ' if key else ''}{why}"
    m = re.search(r"Could not find '([^']+)/([^'/]+)'", msg)
    if m:
        group, option = m.group(1), m.group(2)
        noun = {"campaign": "campaign"}.get(group, group)
        return f"unknown {noun} {option!r}; valid: {', '.join(group_options(group))}"
    m = re.search(r"Could not override '([^']+)'", msg)
    cause = e.__cause__
    first = msg.strip().splitlines()[0] if msg.strip() else type(e).__name__
    if cause is not None and str(cause).strip():
        c = str(cause).strip().splitlines()[0]
        k = re.search(r"Key '([^']+)' not in '(\w+?)_(solver_config|stopping_params)'", c)
        if k:  # a key a solver's or a stopping rule's schema lacks: name the valid ones
            reg, extra = (SOLVERS, COMMON_SOLVER_KEYS) if k.group(3) == "solver_config" else (RULES, ())
            if k.group(3) == "solver_config" and k.group(1) in RENAMED_SOLVER_KEYS:
                return (f"solver.{k.group(1)} is now solver.{RENAMED_SOLVER_KEYS[k.group(1)]} "
                        "(one name for the same setting across solvers)")
            if k.group(2) in reg:
                valid = sorted({f.name for f in dataclasses.fields(reg[k.group(2)].params)} | set(extra))
                c = f"{k.group(2)} has no parameter {k.group(1)!r}; valid: {', '.join(valid) or '(none)'}"
        if m:
            return f"cannot set {m.group(1)}: {c}"
        m = re.search(r"Error merging override (\S+)", first)
        if m:
            valid = constraint_for(m.group(1).lstrip("+~").split("=", 1)[0])
            if valid is not None:
                return f"{m.group(1)} is invalid: must be {valid.describe()} ({c})"
            return f"{m.group(1)} is invalid: {c}"
        return f"{first} {c}"
    return first


def constraint_for(key: str) -> Interval | Choice | None:
    """The declared constraint of a config key, when one is known without composing:
    the fixed schemas' fields, and ``solver.X`` when every solver with a param X agrees."""
    if key in FIELD_CONSTRAINTS:
        return FIELD_CONSTRAINTS[key]
    if key.startswith("solver.") and key.count(".") == 1:
        name = key.split(".", 1)[1]
        found = {f.metadata.get("constraint") for d in SOLVERS.values()
                 for f in dataclasses.fields(d.params) if f.name == name}
        if len(found) == 1:
            return found.pop()
    return None


def compose(overrides: list[str], return_hydra_config: bool = False):
    """Compose the config for a list of Hydra overrides (no files written)."""
    from hydra import compose as hcompose
    from hydra import initialize_config_dir
    from hydra.errors import HydraException
    from omegaconf.errors import OmegaConfBaseException

    register_configs()
    with initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3"):
        try:
            return hcompose(config_name="config", overrides=list(overrides),
                            return_hydra_config=return_hydra_config)
        except (HydraException, OmegaConfBaseException) as e:
            line = hydra_error_line(e)  # while Hydra is initialized, so it can list group options
    raise SpecError(line)
