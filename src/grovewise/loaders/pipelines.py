"""scikit-learn pipelines ending in a tree ensemble -> a Forest over the *raw* columns.

A ``Pipeline`` whose steps are ``ColumnTransformer``, ``SimpleImputer``, ``StandardScaler``,
``MinMaxScaler``, ``OneHotEncoder``, ``OrdinalEncoder``, ``passthrough`` or ``drop`` (nested
as scikit-learn allows), and whose last step is a supported tree ensemble, is read as the
final estimator's Forest with the preprocessing folded into its splits. Every one of these
steps maps each estimator input to one raw column, so each split is a question about one raw
column and can be asked of it directly:

- a raw numeric column passes through monotone steps (imputation, scaling), so the set of raw
  values a split sends left is ``x <= x*``; ``x*`` is found exactly by bisection over the
  float64 numbers, asking scikit-learn's own ``transform`` and the estimator's own split
  rule at every step, so the folded split agrees with the pipeline on every float64 value;
  a missing value goes where the pipeline sends it (its imputed value, or the estimator's
  missing side);
- a raw categorical column (one that an encoder reads) gets codes 0..K-1 in the encoder's
  category order; each split becomes a set split: every category is put through the
  pipeline and the split, and goes to its side; a category the encoder does not know goes
  where the encoder's unknown value goes.

The review then speaks in the raw columns: a scaled column's cut is in the data's own units,
and a one-hot column's split reads ``region = north`` / ``region != north``. Each split keeps
the estimator input it tested (``Tree.model_input``), so usage can be counted per input too.
Anything else in the pipeline is refused with a message naming the step.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np

from ..errors import UnsupportedModelError
from ..forest import (COMPARE_LE_FLOAT64, MISSING_NAN, MISSING_ZERO, CategorySplit, Forest, Tree,
                      plain_feature_names)
from .families import Family

ELEMENTWISE = ("SimpleImputer", "StandardScaler", "MinMaxScaler")
ENCODERS = ("OneHotEncoder", "OrdinalEncoder")
UNKNOWN = "\x00grovewise-unknown-category"  # a value no encoder was fitted on
_MAX = np.finfo(np.float64).max
_MAGNITUDE = np.int64(0x7FFFFFFFFFFFFFFF)


def is_pipeline(obj) -> bool:
    return type(obj).__name__ == "Pipeline" and type(obj).__module__.startswith("sklearn.")


@dataclass(frozen=True)
class Source:
    """Where one column inside the pipeline comes from: raw column ``raw``; whether an encoder
    has read it (``encoder`` is then that encoder and ``slot`` its column in it); whether it is
    still the raw value itself (``identity``)."""

    raw: int
    encoder: object = None
    slot: int = -1
    identity: bool = True


def _refuse(step, why: str = "") -> UnsupportedModelError:
    name = step if isinstance(step, str) else type(step).__name__
    return UnsupportedModelError(
        f"the pipeline holds the step {name!r}{why}; Grovewise folds only ColumnTransformer, "
        "SimpleImputer, StandardScaler, MinMaxScaler, OneHotEncoder, OrdinalEncoder, "
        "'passthrough' and 'drop' into the model's splits, which keeps the review exact. "
        "Give the model without that step, or the pipeline with supported steps only.")


# ---------------------------------------------------------------------------- structure
def _trace(step, sources: list[Source]) -> list[Source]:
    """The sources of ``step``'s output columns, given the sources of its input columns."""
    if step is None or (isinstance(step, str) and step == "passthrough"):
        return list(sources)
    if isinstance(step, str) and step == "drop":
        return []
    name = type(step).__name__
    if not type(step).__module__.startswith("sklearn."):
        raise _refuse(step)
    if name == "FunctionTransformer" and step.func is None and step.inverse_func is None:
        return list(sources)  # how a ColumnTransformer stores 'passthrough'
    if name == "Pipeline":
        for _, inner in step.steps:
            sources = _trace(inner, sources)
        return sources
    if name == "ColumnTransformer":
        out = []
        for tname, inner, _ in step.transformers_:
            if isinstance(inner, str) and inner == "drop":
                continue
            picked = _input_indices(step, tname, len(sources))
            out.extend(_trace(inner, [sources[j] for j in picked]))
        return out
    if name == "SimpleImputer":
        if step.add_indicator:
            raise _refuse(step, " with add_indicator=True")
        keep = [j for j, s in enumerate(sources)
                if getattr(step, "keep_empty_features", False)
                or not _is_nan(step.statistics_[j])]
        return [replace(sources[j], identity=False) for j in keep]
    if name in ("StandardScaler", "MinMaxScaler"):
        if name == "MinMaxScaler" and np.any(np.asarray(step.scale_) <= 0):
            raise _refuse(step, " with a decreasing feature_range")
        return [replace(s, identity=False) for s in sources]
    if name in ENCODERS:
        if getattr(step, "_infrequent_enabled", False):
            raise _refuse(step, " grouping infrequent categories (min_frequency / "
                                "max_categories)")
        out = []
        for j, s in enumerate(sources):
            if s.encoder is not None:
                raise _refuse(step, " reading a column that another encoder already encoded")
            enc = Source(raw=s.raw, encoder=step, slot=j, identity=False)
            if name == "OrdinalEncoder":
                out.append(enc)
            else:
                dropped = step.drop_idx_ is not None and step.drop_idx_[j] is not None
                out.extend([enc] * (len(step.categories_[j]) - int(dropped)))
        return out
    raise _refuse(step)


def _input_indices(ct, name: str, n_inputs: int) -> list[int]:
    """The input columns a ColumnTransformer hands to its transformer ``name``."""
    mapping = getattr(ct, "_transformer_to_input_indices", None)
    if mapping is not None and name in mapping:
        return [int(j) for j in mapping[name]]
    raise UnsupportedModelError(  # pragma: no cover - every supported version has the mapping
        "this scikit-learn version does not say which columns a ColumnTransformer's parts read; "
        "use scikit-learn 1.5 or newer.")


def _is_nan(v) -> bool:
    try:
        return bool(np.isnan(v))
    except TypeError:
        return False


@dataclass
class _Layout:
    """The pipeline's raw columns and how the estimator's inputs come from them."""

    names: list[str]
    has_names: bool
    sources: list[Source]  # one per estimator input
    categories: dict  # raw column -> list of category values (NaN left out), in code order
    encoder_of: dict  # raw column -> (encoder, slot)
    dtypes: dict  # raw column -> "category" for categorical columns


def _layout(pipe) -> _Layout:
    names = getattr(pipe, "feature_names_in_", None)
    n_raw = int(pipe.n_features_in_)
    has_names = names is not None
    names = [str(n) for n in names] if has_names else plain_feature_names(n_raw)
    sources = [Source(raw=j) for j in range(n_raw)]
    for _, step in pipe.steps[:-1]:
        sources = _trace(step, sources)
    n_inputs = int(getattr(pipe.steps[-1][1], "n_features_in_", len(sources)))
    if len(sources) != n_inputs:
        raise UnsupportedModelError(
            f"the pipeline's preprocessing makes {len(sources)} columns but its estimator "
            f"reads {n_inputs}; Grovewise could not trace every column to a raw column.")
    categories, encoder_of = {}, {}
    for s in sources:
        if s.encoder is None:
            continue
        if s.raw in encoder_of and encoder_of[s.raw][0] is not s.encoder:
            raise UnsupportedModelError(
                f"the raw column {names[s.raw]!r} is encoded by two encoders; Grovewise folds "
                "a column encoded once. Encode each column once.")
        encoder_of[s.raw] = (s.encoder, s.slot)
        categories[s.raw] = [c for c in s.encoder.categories_[s.slot] if not _is_nan(c)]
    numeric_and_encoded = {s.raw for s in sources if s.encoder is None} & set(encoder_of)
    if numeric_and_encoded:
        raw = names[min(numeric_and_encoded)]
        raise UnsupportedModelError(
            f"the raw column {raw!r} reaches the estimator both encoded and as a number; "
            "Grovewise folds a column that is one or the other.")
    return _Layout(names=names, has_names=has_names, sources=sources, categories=categories,
                   encoder_of=encoder_of, dtypes={r: "category" for r in categories})


# ---------------------------------------------------------------------------- probing
class _Probe:
    """Puts chosen raw values through the pipeline's own preprocessing (``transform``)."""

    def __init__(self, pipe, layout: _Layout):
        self.pre = pipe[:-1]
        self.layout = layout
        n_raw = len(layout.names)
        self.filler = [layout.categories[r][0] if r in layout.categories else 0.0
                       for r in range(n_raw)]

    def frame(self, columns: dict, rows: int):
        """A raw table of ``rows`` rows: the given columns' values, the filler elsewhere."""
        import pandas as pd

        data = {}
        for r, name in enumerate(self.layout.names):
            if r in columns:
                values = columns[r]
            else:
                values = [self.filler[r]] * rows
            kind = object if r in self.layout.categories else np.float64
            data[name] = pd.Series(values, dtype=kind)
        frame = pd.DataFrame(data)
        return frame if self.layout.has_names else frame.to_numpy(dtype=object)

    def transform(self, columns: dict, rows: int) -> np.ndarray:
        # Probes reach the largest float64 numbers; scaling them may overflow to inf, which is
        # what the pipeline itself would do with such a value.
        with warnings.catch_warnings(), np.errstate(over="ignore", invalid="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            out = self.pre.transform(self.frame(columns, rows))
        if hasattr(out, "toarray"):
            out = out.toarray()
        return np.asarray(out, dtype=np.float64)


def _ordered_key(x: np.ndarray) -> np.ndarray:
    """float64 -> int64 keys in the numbers' order (both zeros share key 0)."""
    bits = x.view(np.int64)
    return np.where(bits < 0, -(bits & _MAGNITUDE), bits)


def _from_key(k: np.ndarray) -> np.ndarray:
    bits = np.where(k < 0, (-k) | np.int64(-0x8000000000000000), k).astype(np.int64)
    return bits.view(np.float64)


def _fold_numeric(inner: Forest, probe: _Probe, nodes: dict) -> dict:
    """For raw numeric columns: ``nodes[r]`` = (global node ids, estimator inputs) of the
    splits on column ``r``. Returns ``{global node: (threshold, missing_left)}``."""
    if not nodes:
        return {}
    rows = max(len(g) for g, _ in nodes.values())
    folded = {}

    def sides(values: dict) -> dict:
        table = probe.transform({r: list(v) + [0.0] * (rows - len(v)) for r, v in values.items()},
                                rows)
        with np.errstate(over="ignore"):
            return {r: inner.goes_left(g, table[np.arange(len(g)), inputs])
                    for r, (g, inputs) in nodes.items()}

    lo = {r: np.full(len(g), -_MAX) for r, (g, _) in nodes.items()}
    hi = {r: np.full(len(g), _MAX) for r, (g, _) in nodes.items()}
    at_lo, at_hi = sides(lo), sides(hi)
    lo_key = {r: _ordered_key(lo[r]) for r in nodes}
    hi_key = {r: _ordered_key(hi[r]) for r in nodes}
    for _ in range(66):  # keys span < 2^64: 64 halvings leave neighbours
        mid_key = {r: lo_key[r] // 2 + hi_key[r] // 2 + ((lo_key[r] % 2 + hi_key[r] % 2) // 2)
                   for r in nodes}
        if all(np.all(hi_key[r] <= lo_key[r] + 1) for r in nodes):
            break
        left = sides({r: _from_key(mid_key[r]) for r in nodes})
        for r in nodes:
            lo_key[r] = np.where(left[r], mid_key[r], lo_key[r])
            hi_key[r] = np.where(left[r], hi_key[r], mid_key[r])
    missing = sides({r: np.full(len(g), np.nan) for r, (g, _) in nodes.items()})
    for r, (g, _) in nodes.items():
        x_star = _from_key(lo_key[r])
        x_star = np.where(at_hi[r], np.inf, np.where(at_lo[r], x_star, -np.inf))
        for k, t, m in zip(g, x_star, missing[r]):
            folded[int(k)] = (float(t), bool(m))
    return folded


def _fold_categorical(inner: Forest, probe: _Probe, layout: _Layout, nodes: dict) -> dict:
    """For raw categorical columns: ``{global node: (CategorySplit, missing_left)}``."""
    folded = {}
    for r, (g, inputs) in nodes.items():
        cats = layout.categories[r]
        values = list(cats) + [UNKNOWN, np.nan]
        table = np.full((len(values), len(layout.sources)), np.nan)
        known = probe.transform({r: cats}, len(cats))
        table[:len(cats)] = known
        for i, v in ((len(cats), UNKNOWN), (len(cats) + 1, np.nan)):
            try:
                table[i] = probe.transform({r: [v]}, 1)[0]
            except ValueError:  # the encoder refuses unknown / missing values
                table[i] = np.nan
        refuses = np.isnan(table[len(cats):]).all(axis=1)
        for k, i in zip(g, inputs):
            side = inner.goes_left(np.full(len(values), k), table[:, i])
            codes = np.arange(len(cats))
            split = CategorySplit(left=codes[side[:len(cats)]], right=codes[~side[:len(cats)]],
                                  other_left=bool(side[len(cats)]) and not refuses[0])
            folded[int(k)] = (split, bool(side[len(cats) + 1]))
    return folded


# ---------------------------------------------------------------------------- conversion
def forest_from_pipeline(pipe) -> Forest:
    """Convert a fitted scikit-learn Pipeline ending in a supported tree ensemble."""
    from .estimators import from_estimator

    if not hasattr(pipe, "steps") or not pipe.steps:
        raise UnsupportedModelError("the pipeline has no steps.")
    final = pipe.steps[-1][1]
    if is_pipeline(final):
        raise _refuse(final, " as its last step")
    inner = from_estimator(final)
    try:
        layout = _layout(pipe)
    except AttributeError:
        raise UnsupportedModelError("the pipeline is not fitted; fit it first.") from None
    if len(layout.sources) != inner.n_features:
        raise UnsupportedModelError(
            f"the pipeline makes {len(layout.sources)} columns but its estimator has "
            f"{inner.n_features} inputs.")
    probe = _Probe(pipe, layout)
    offsets = inner._flat["offsets"]
    numeric, categorical = {}, {}
    for t, (tree, o) in enumerate(zip(inner.trees, offsets)):
        rules = tree.rules
        for k in np.flatnonzero(tree.feature >= 0):
            i = int(tree.feature[k])
            src = layout.sources[i]
            if src.raw in layout.categories:
                target = categorical
            elif rules[k] >= 3 and src.identity:
                continue  # a categorical split on a raw column as it is: kept as it is
            elif rules[k] >= 3:
                raise UnsupportedModelError(
                    f"the estimator splits input {i} as categories, but the pipeline has "
                    f"changed the raw column {layout.names[src.raw]!r} before it; Grovewise "
                    "cannot state such a split in the raw column.")
            elif rules[k] == MISSING_ZERO:
                raise UnsupportedModelError(
                    f"the estimator treats zero as missing on input {i}, made from "
                    f"{layout.names[src.raw]!r} by the pipeline; such a split is not a cut of "
                    "the raw column. Retrain without zero_as_missing.")
            else:
                target = numeric
            g, ins = target.setdefault(src.raw, ([], []))
            g.append(int(o) + int(k))
            ins.append(i)
    numeric = {r: (np.asarray(g), np.asarray(i)) for r, (g, i) in numeric.items()}
    categorical = {r: (np.asarray(g), np.asarray(i)) for r, (g, i) in categorical.items()}
    folded = {**_fold_numeric(inner, probe, numeric),
              **_fold_categorical(inner, probe, layout, categorical)}
    trees = [_fold_tree(tree, int(o), folded, layout) for tree, o in zip(inner.trees, offsets)]
    categories = {r: [str(c) for c in cats] for r, cats in layout.categories.items()}
    for i, names in inner.categories.items():  # categorical raw columns kept as they are
        categories.setdefault(layout.sources[i].raw, names)
    steps = ", ".join(type(s).__name__ if not isinstance(s, str) else s for _, s in pipe.steps)
    return Forest(trees=trees, classes_=inner.classes_, feature_names=layout.names,
                  has_feature_names=layout.has_names, kind=inner.kind, link=inner.link,
                  compare=COMPARE_LE_FLOAT64, base_score=inner.base_score,
                  categories=categories,
                  source={**inner.source, "estimator": f"Pipeline({steps})",
                          "final_estimator": inner.source.get("estimator"),
                          "final_compare": inner.compare},
                  model_inputs=_input_names(pipe, inner),
                  input_feature=[s.raw for s in layout.sources])


def _input_names(pipe, inner: Forest) -> list[str]:
    """The estimator's input names: the preprocessing's own (``region_north``), else the
    estimator's."""
    try:
        names = [str(n) for n in pipe[:-1].get_feature_names_out()]
    except (AttributeError, ValueError, TypeError):
        return list(inner.feature_names)
    return names if len(names) == inner.n_features else list(inner.feature_names)


def _fold_tree(tree: Tree, offset: int, folded: dict, layout: _Layout) -> Tree:
    feature = tree.feature.copy()
    threshold = tree.threshold.copy()
    missing_left = tree.missing_left.copy()
    rule = np.full(tree.n_nodes, MISSING_NAN, dtype=np.int8)
    categorical = dict(tree.categorical or {})
    internal = np.flatnonzero(tree.feature >= 0)
    for k in internal:
        feature[k] = layout.sources[int(tree.feature[k])].raw
        what = folded.get(offset + int(k))
        if what is None:
            continue  # kept as it is
        categorical.pop(int(k), None)
        if isinstance(what[0], CategorySplit):
            categorical[int(k)] = what[0]
            threshold[k] = 0.0
        else:
            threshold[k] = what[0]
        missing_left[k] = what[1]
    if tree.missing_rule is not None:  # kept categorical nodes keep their rule
        keep = np.isin(np.arange(tree.n_nodes), [k for k in internal if offset + k not in folded])
        rule[keep] = tree.missing_rule[keep]
    model_input = np.where(tree.feature >= 0, tree.feature, -1)
    return replace(tree, feature=feature, threshold=threshold, missing_left=missing_left,
                   missing_rule=rule, categorical=categorical or None, model_input=model_input)


# ---------------------------------------------------------------------------- reference
def raw_frame(pipe, X: np.ndarray):
    """The Forest's rows (codes for categorical columns) as the raw table the pipeline reads."""
    import pandas as pd

    layout = _layout(pipe)
    data = {}
    for r, name in enumerate(layout.names):
        col = X[:, r]
        if r in layout.categories:
            cats = layout.categories[r]
            values = [np.nan if v != v else (cats[int(v)] if 0 <= v < len(cats) and v == int(v)
                                             else UNKNOWN) for v in col]
            data[name] = pd.Series(values, dtype=object)
        else:
            data[name] = pd.Series(col, dtype=np.float64)
    frame = pd.DataFrame(data)
    return frame if layout.has_names else frame.to_numpy(dtype=object)


def pipeline_reference(native, X: np.ndarray, forest: Forest):
    """The pipeline's own ``predict_proba`` on the raw table (scikit-learn does the rest)."""
    proba = native.predict_proba(raw_frame(native, X))
    return proba, np.argmax(proba, axis=1), None


FAMILY = Family(library="scikit-learn", tolerance=1e-9, matches=is_pipeline,
                convert=forest_from_pipeline, reference=pipeline_reference,
                supported="a scikit-learn Pipeline of ColumnTransformer, SimpleImputer, "
                          "StandardScaler, MinMaxScaler, OneHotEncoder, OrdinalEncoder, "
                          "'passthrough' and 'drop' ending in one of these")
