"""Compose run configs with Hydra once per combination of config-group choices.

Hydra composes a config in two steps: it builds the defaults list from the config-group
overrides (``solver=sgd``, ``+campaign=demo``, ``hydra/launcher=joblib``) and merges the
chosen files, then it applies the remaining value overrides (``seed=3``,
``solver.step_scale=0.5``, ``+x=1``, ``++x=1``, ``~x``) to the merged config
(``ConfigLoaderImpl._apply_overrides_to_config``). The first step is what costs
(0.1-0.5 s); the second is cheap. A sweep of thousands of jobs has only a few distinct
group choices, so :class:`Composer` runs the first step once per distinct choice and
the second per job, with Hydra's own override objects and Hydra's own function for the
second step, so every override means what it means to Hydra.

For the common job (plain ``key=value`` changes of leaf values in a config without
interpolations) the second step is done on a plain copy of the composed config: each
distinct override is applied once through Hydra on a scratch copy, and the value Hydra
stored (converted to the schema's type) is reused for every job that has it. Anything
else (``+``, ``++``, ``~``, dict values, interpolations, nested keys of one another) goes
through Hydra on a full copy of the composed config. ``tests/config/test_compose.py``
checks both ways against composing every job from scratch.
"""
from __future__ import annotations

import copy
import dataclasses
import re
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any, Iterator

from stopwise.config.spec import SpecError, conf_dir, hydra_error_line, plain_copy, register_configs
from stopwise.core.errors import StopwiseError


@contextmanager
def hydra_context() -> Iterator[Any]:
    """Initialize Hydra on stopwise's config dir for many compositions."""
    from hydra import initialize_config_dir
    from hydra.core.global_hydra import GlobalHydra

    register_configs()
    with initialize_config_dir(config_dir=str(conf_dir()), version_base="1.3"):
        yield GlobalHydra.instance()


def compose_job(overrides: list[str], return_hydra_config: bool = False, config_name: str = "config"):
    """Hydra's own composition of one job (inside :func:`hydra_context`); errors as one line.
    ``config_name``: ``config`` (a run's config) or ``launch`` (a launched chunk's)."""
    from hydra import compose
    from hydra.errors import HydraException
    from omegaconf.errors import OmegaConfBaseException

    try:
        return compose(config_name=config_name, overrides=list(overrides), return_hydra_config=return_hydra_config)
    except (HydraException, OmegaConfBaseException) as e:
        raise SpecError(hydra_error_line(e)) from None


def _has_interpolation(obj: Any) -> bool:
    if isinstance(obj, dict):
        return any(_has_interpolation(v) for v in obj.values())
    if isinstance(obj, list):
        return any(_has_interpolation(v) for v in obj)
    return isinstance(obj, str) and "${" in obj


@dataclass
class Base:
    """One composed config: the DictConfig, its plain resolved copy, and per-override probes."""

    cfg: Any
    plain: dict
    simple: bool                    # no interpolation anywhere: leaf values can be set directly
    scratch: Any = None             # a copy that probes write into (leaf values only)
    probes: dict = field(default_factory=dict)  # override line -> value Hydra stored
    templates: dict = field(default_factory=dict)  # (key, number type) -> how Hydra stored such a number

    def at(self, path: tuple[str, ...]) -> Any:
        node: Any = self.plain
        for p in path:
            if not isinstance(node, dict) or p not in node:
                return _ABSENT
            node = node[p]
        return node


_ABSENT = object()
_NUMBER = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*(?:\.[A-Za-z_][A-Za-z0-9_]*)*)=(-?(?:0|[1-9][0-9]*)(?:\.[0-9]+)?)$")


class CompositionMiss(StopwiseError):
    """A detached composer met a group or a composition it has not seen (internal)."""


class Composer:
    """Configs of many jobs at the cost of one Hydra composition per distinct group choice.

    ``config(job)`` returns what ``OmegaConf.to_container(compose(job), resolve=True)``
    returns, without the ``hydra`` node. Use it inside :func:`hydra_context`, or detached
    (``live=False``) for jobs whose groups and compositions it has seen before.
    """

    def __init__(self, live: bool = True) -> None:
        from hydra.core.override_parser.overrides_parser import OverridesParser

        self.parser = OverridesParser.create()  # grammar only; attach() adds Hydra's loader
        self.repo = None
        self._parsed: dict[str, Any] = {}
        self._templates: dict[str, Any] = {}
        self._groups: dict[str, bool] = {}
        self.bases: dict[tuple[str, ...], Base] = {}
        self._unseeded: dict[tuple, dict] = {}  # (base, value overrides but the seed) -> config
        if live:
            self.attach()

    def attach(self) -> None:
        """Bind to the Hydra instance in force (inside :func:`hydra_context`)."""
        from hydra._internal.config_repository import CachingConfigRepository
        from hydra.core.global_hydra import GlobalHydra
        from hydra.core.override_parser.overrides_parser import OverridesParser

        loader = GlobalHydra.instance().config_loader()
        self.parser = OverridesParser.create(config_loader=loader)
        self.repo = CachingConfigRepository(loader.repository)  # type: ignore[attr-defined]

    def detach(self) -> None:
        from hydra.core.override_parser.overrides_parser import OverridesParser

        self.parser = OverridesParser.create()
        self.repo = None

    # ------------------------------------------------ overrides
    def parse(self, line: str):
        o = self._parsed.get(line)
        if o is None:
            o = self._parse_number(line)
        if o is None:
            o = self._parsed[line] = self._grammar(line)
        return o

    def _grammar(self, line: str):
        from hydra.errors import HydraException

        try:
            (o,) = self.parser.parse_overrides([line])
        except HydraException as e:
            raise SpecError(hydra_error_line(e)) from None
        return o

    def _parse_number(self, line: str):
        """``key=12`` / ``key=-0.5``: the Override Hydra's grammar makes of it, without
        running the grammar (a sweep over a thousand seeds has a thousand such lines).
        Hydra's parse of the first ``key=0`` of each key is the template; only plain
        decimal numbers take this path (``tests/config/test_compose.py`` checks them)."""
        m = _NUMBER.match(line)
        if m is None:
            return None
        key, text = m.group(1), m.group(2)
        template = self._templates.get(key)
        if template is None:
            template = self._templates[key] = self._grammar(f"{key}=0")
            if template.type.name != "CHANGE" or template.value_type.name != "ELEMENT":
                return None
        value = float(text) if "." in text else int(text)
        o = dataclasses.replace(template, _value=value, input_line=line)
        self._parsed[line] = o
        return o

    def is_group(self, o) -> bool:
        """Hydra's own test (``hydra._internal.defaults_list.Overrides``): a config group
        that exists, with a value that is not a dict."""
        key = o.key_or_group
        known = self._groups.get(key)
        if known is None:
            if self.repo is None:
                raise CompositionMiss
            known = self._groups[key] = bool(self.repo.group_exists(key))
        return known and not isinstance(o.value(), dict)

    def _check_group_value(self, o, line: str) -> None:
        """A config group takes the name of one of its options: a number, ``nan``, ``inf``,
        a list or an empty value is one line naming the group and its options (Hydra
        itself raises a bare ValueError with a traceback for a number)."""
        if o.is_delete():
            return
        v = o.value()
        if isinstance(v, str) and v.strip():
            return
        key = o.key_or_group
        options: list[str] = []
        try:
            if self.repo is not None:
                options = sorted(self.repo.get_group_options(key))
        except Exception:  # noqa: BLE001 - the list is a courtesy; the refusal stands without it
            options = []
        if not options:  # no Hydra repository at hand: the packaged folder's options
            options = sorted(p.stem for p in (conf_dir() / key).glob("*.yaml"))
        shown = "an empty value" if isinstance(v, str) or v is None else (
            "a list" if isinstance(v, (list, tuple)) else f"the {type(v).__name__} {v!r}")
        raise SpecError(f"{line.strip()!r} is invalid: {key} is a config group and takes the name of one of its "
                        f"options, not {shown}; valid: {', '.join(options) or '(none)'}")

    def split(self, job: list[str]) -> tuple[tuple[str, ...], list]:
        """(the lines that shape the composition, the value overrides applied after it).
        Group choices and every ``hydra...`` override shape the composition; the rest are
        applied per job."""
        shaping: list[str] = []
        values: list = []
        for line in job:
            o = self.parse(line)
            if o.is_sweep_override():
                raise SpecError(f"{line!r} is a sweep; it belongs on the stopwise sweep command line")
            if self.is_group(o):
                self._check_group_value(o, line)
                shaping.append(line)
            elif o.is_hydra_override():
                shaping.append(line)
            else:
                values.append(o)
        return tuple(shaping), values

    # ------------------------------------------------ composition
    def base(self, shaping: tuple[str, ...]) -> Base:
        b = self.bases.get(shaping)
        if b is None:
            if self.repo is None:
                raise CompositionMiss
            from omegaconf import OmegaConf

            cfg = compose_job(list(shaping))
            raw = OmegaConf.to_container(cfg, resolve=False)
            b = Base(cfg=cfg, plain=OmegaConf.to_container(cfg, resolve=True), simple=not _has_interpolation(raw))
            self.bases[shaping] = b
        return b

    def config(self, job: list[str]) -> dict:
        shaping, values = self.split(job)
        return self.apply(self.base(shaping), values)

    def apply(self, base: Base, overrides: list) -> dict:
        """The plain config after Hydra applies ``overrides`` to ``base``."""
        if self._fast(base, overrides):
            out = plain_copy(base.plain)
            for o in overrides:
                path = tuple(o.key_or_group.split("."))
                node = out
                for p in path[:-1]:
                    node = node[p]
                node[path[-1]] = plain_copy(self._probe(base, o))
            return out
        return self._slow(base, overrides)

    def apply_shared(self, base: Base, overrides: list) -> dict:
        """:meth:`apply` for jobs that differ only in their seed: the config without the seed
        override is made once, and each job's is a shallow copy of it with the seed Hydra
        stores. Only where the leaf values are set directly (no interpolation anywhere, so
        nothing else reads the seed); the sections are shared between the results: read
        them, do not modify them."""
        seeds = [o for o in overrides if o.key_or_group == "seed"]
        if len(seeds) != 1 or not self._fast(base, overrides):
            return self.apply(base, overrides)
        rest = [o for o in overrides if o is not seeds[0]]
        key = (id(base), tuple(o.input_line for o in rest))
        cfg = self._unseeded.get(key)
        if cfg is None:
            cfg = self._unseeded[key] = self.apply(base, rest)
        out = dict(cfg)
        out["seed"] = plain_copy(self._probe(base, seeds[0]))
        return out

    def _fast(self, base: Base, overrides: list) -> bool:
        from hydra.core.override_parser.types import OverrideType

        if not base.simple:
            return False
        keys: list[str] = []
        for o in overrides:
            key = o.key_or_group
            if o.type != OverrideType.CHANGE or o.package is not None or "[" in key:
                return False
            v = o.value()
            if isinstance(v, dict) or _has_interpolation(v):
                return False
            here = base.at(tuple(key.split(".")))
            if here is _ABSENT or isinstance(here, (dict, list)):
                return False  # Hydra's error for a missing key, or a merge into a node
            keys.append(key)
        for a in keys:  # one value per key, none inside another
            for b in keys:
                if a is not b and (a == b or b.startswith(a + ".")):
                    return False
        return True

    def _probe(self, base: Base, o) -> Any:
        """The value Hydra stores for override ``o`` on ``base``: Hydra's own override
        application on a scratch copy, once per override line. A number given to a key is
        stored the same way whatever the number (as given, or as a float on a float node),
        so once a key has stored one int (or float) as given or as its float, other numbers
        of that type take the same path without Hydra (a sweep over 2,500 seeds probes once)."""
        line = o.input_line
        if line in base.probes:
            return base.probes[line]
        v = o.value()
        number = type(v) in (int, float)  # bool is not a number here
        how = base.templates.get((o.key_or_group, type(v))) if number else None
        if how == "as given":
            return v
        if how == "float":
            return float(v)
        from hydra._internal.config_loader_impl import ConfigLoaderImpl
        from hydra.errors import HydraException
        from omegaconf import DictConfig, ListConfig, OmegaConf
        from omegaconf.errors import OmegaConfBaseException

        if base.scratch is None:
            base.scratch = copy.deepcopy(base.cfg)
        try:
            ConfigLoaderImpl._apply_overrides_to_config([o], base.scratch)
        except (HydraException, OmegaConfBaseException) as e:
            raise SpecError(hydra_error_line(e)) from None
        stored = OmegaConf.select(base.scratch, o.key_or_group)
        if isinstance(stored, (DictConfig, ListConfig)):
            stored = OmegaConf.to_container(stored, resolve=True)
        base.probes[line] = stored
        if number and type(stored) is type(v) and stored == v:
            base.templates[(o.key_or_group, type(v))] = "as given"
        elif number and type(v) is int and type(stored) is float and stored == float(v):
            base.templates[(o.key_or_group, type(v))] = "float"
        return stored

    def _slow(self, base: Base, overrides: list) -> dict:
        from hydra._internal.config_loader_impl import ConfigLoaderImpl
        from hydra.errors import HydraException
        from omegaconf import OmegaConf
        from omegaconf.errors import OmegaConfBaseException

        cfg = copy.deepcopy(base.cfg)
        try:
            ConfigLoaderImpl._apply_overrides_to_config(list(overrides), cfg)
            return OmegaConf.to_container(cfg, resolve=True)
        except (HydraException, OmegaConfBaseException) as e:
            raise SpecError(hydra_error_line(e)) from None


# ---------------------------------------------------------------- the Python API's cache

_API: dict[str, Any] = {}
_API_SIZE = 64  # distinct group choices kept


def compose_cached(overrides: list[str]) -> dict:
    """The plain config of one job, composing with Hydra only for a group choice not seen
    before in this process (``stopwise.run`` and ``load_problem`` in a loop pay one
    composition per combination of group choices). Everything cached is dropped when
    solvers or stopping rules are registered or removed.

    >>> cfg = compose_cached(["dataset=diabetes", "solver=sgd", "solver.batch=0.2", "seed=3"])
    >>> cfg["seed"], cfg["solver"]["name"], cfg["solver"]["batch"], cfg["dataset"]["name"]
    (3, 'sgd', 0.2, 'diabetes')
    >>> compose_cached(["dataset=diabetes", "solver=sgd", "seed=4"])["solver"]["batch"]  # the default: one row per step
    1.0
    """
    from stopwise.config.spec import registration_generation

    register_configs()
    key = (registration_generation(), str(conf_dir()))
    if _API.get("key") != key:
        _API.clear()
        _API.update(key=key, composer=Composer(live=False))
    composer: Composer = _API["composer"]
    if len(composer.bases) > _API_SIZE:
        composer.bases.clear()
    try:
        return composer.config(list(overrides))
    except CompositionMiss:
        pass
    with hydra_context():
        composer.attach()
        try:
            return composer.config(list(overrides))
        finally:
            composer.detach()


def spec_from_overrides(overrides: list[str]):
    """The RunSpec of one job; Hydra composes once per combination of group choices in
    this process (:func:`compose_cached`)."""
    from stopwise.config.spec import spec_from_config

    return spec_from_config(compose_cached(list(overrides)))


__all__ = ["Base", "Composer", "compose_cached", "compose_job", "hydra_context", "plain_copy", "spec_from_overrides"]
