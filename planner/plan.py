"""The reduction plan of a record, applied to new rows exactly as recorded.

The plan is read from the record alone: the features, their center and scale, the loadings
and eigenvalues of the chosen components and the 95% limits. It is never refitted on the
new rows. It fits into a scikit-learn style pipeline (``transform``,
``get_feature_names_out``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import InputError


def _provenance(record: dict) -> dict:
    """Where a plan comes from: the record's identifier column, id and status."""
    return {"id_column": record["input"].get("id_column"), "record_id": record.get("record_id"),
            "status": record.get("status")}


def _numbers(frame: pd.DataFrame, columns: list[str]) -> np.ndarray:
    """The columns of a frame as floats, NaN where a cell is not a number."""
    return frame[columns].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)


@dataclass
class ReductionPlan:
    """z = (x - center) / scale; scores = z P_k; SPE = ||z - scores P_k^T||^2;
    T^2 = sum scores^2 / eigenvalues."""

    columns: list[str]
    center: np.ndarray
    scale: np.ndarray
    loadings: np.ndarray      # (p, k)
    eigenvalues: np.ndarray   # (k,)
    spe_limit: float | None
    t2_limit: float | None
    id_column: str | None = None
    record_id: str | None = None
    status: str | None = None

    @classmethod
    def from_record(cls, record: dict) -> "ReductionPlan":
        dec, comp = record["decomposition"], record["components"]
        k = int(comp["chosen"])
        columns = list(record["input"]["columns_used"])
        loadings = np.array([dec["loadings"][c][:k] for c in columns], dtype=float)
        disc = record.get("discarded") or {}
        return cls(
            columns=columns,
            center=np.array([dec["center"][c] for c in columns], dtype=float),
            scale=np.array([dec["scale"][c] for c in columns], dtype=float),
            loadings=loadings,
            eigenvalues=np.array(dec["eigenvalues"][:k], dtype=float),
            spe_limit=disc.get("spe_limit"),
            t2_limit=disc.get("t2_limit"),
            **_provenance(record),
        )

    plan_id = "components"

    @property
    def k(self) -> int:
        return self.loadings.shape[1]

    def required_columns(self) -> list[str]:
        return list(self.columns)

    def spe_computable(self, columns) -> bool:
        """Whether rows with these columns get an SPE: when every feature is among them."""
        return all(c in columns for c in self.columns)

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        return np.array([f"PC{j + 1}" for j in range(self.k)], dtype=object)

    def fit(self, x=None, y=None) -> "ReductionPlan":
        """A recorded plan is already fitted; present for pipeline compatibility."""
        return self

    def _matrix(self, frame) -> np.ndarray:
        if isinstance(frame, pd.DataFrame):
            missing = [c for c in self.columns if c not in frame.columns]
            if missing:
                raise InputError(
                    f"the data lacks {len(missing)} feature column(s) of the plan: {', '.join(missing[:10])}",
                    "give a table with the columns the record was made from",
                )
            values = _numbers(frame, self.columns)
        else:
            values = np.asarray(frame, dtype=float)
            if values.ndim != 2 or values.shape[1] != len(self.columns):
                raise InputError(f"expected {len(self.columns)} feature columns, got {values.shape}", "pass the plan's columns in order")
        return values

    def scaled(self, frame) -> np.ndarray:
        return (self._matrix(frame) - self.center) / self.scale

    def transform(self, frame) -> np.ndarray:
        """Scores of the rows on the chosen components (NaN where a feature is missing)."""
        return self.scaled(frame) @ self.loadings

    def score_rows(self, frame) -> pd.DataFrame:
        """PC1..PCk, ``spe``, ``t2`` and ``beyond_limit`` (1 beyond either 95% limit)."""
        z = self.scaled(frame)
        scores = z @ self.loadings
        residual = z - scores @ self.loadings.T
        spe = np.sum(residual**2, axis=1)
        t2 = np.sum(scores**2 / self.eigenvalues, axis=1)
        out = pd.DataFrame(scores, columns=list(self.get_feature_names_out()))
        out["spe"] = spe
        out["t2"] = t2
        beyond = spe_beyond(spe, self.spe_limit, np.sum(z**2, axis=1))
        if self.t2_limit is not None:
            beyond |= t2 > self.t2_limit
        out["beyond_limit"] = limit_flags(beyond, spe)
        return out


#: An SPE below this share of the row's own squared norm is rounding, not a residual.
ROUNDING = 1e-24


def spe_beyond(spe: np.ndarray, limit: float | None, norm2: np.ndarray) -> np.ndarray:
    """Rows of new data beyond the plan's SPE limit. A limit of 0 (nothing discarded in the
    data the plan was made from) still flags a row whose residual is real, one that breaks
    an exact relation of those data; an SPE at the rounding of the row's norm is none."""
    if limit is None:
        return np.zeros(len(spe), dtype=bool)
    with np.errstate(invalid="ignore"):
        return (spe > limit) & (spe > ROUNDING * norm2)


def limit_flags(beyond: np.ndarray, spe: np.ndarray) -> pd.Series:
    """1 beyond a limit, 0 within, empty where the row could not be scored."""
    flag = pd.Series(beyond.astype(int), dtype="Int64")
    flag[np.isnan(spe)] = pd.NA
    return flag


@dataclass
class FeaturePlan:
    """A recorded plan that keeps original features (``feature_subset`` or ``vif_pruning``).

    ``transform`` gives the kept columns as they are; only they need to be present.
    ``score_rows`` adds, when the other feature columns are present too, the SPE of the row
    rebuilt from the kept ones, z_hat = z_kept B in the scaled units of the record
    (z = (x - center) / scale), and a flag beyond the plan's 95% SPE limit.
    """

    plan_id: str
    kept: list[str]
    rebuilt: list[str]
    center: dict[str, float]
    scale: dict[str, float]
    coefficients: np.ndarray | None  # (len(kept), len(rebuilt)); None when the record does not hold them
    spe_limit: float | None
    id_column: str | None = None
    record_id: str | None = None
    status: str | None = None

    @classmethod
    def from_record(cls, record: dict, plan_id: str) -> "FeaturePlan":
        row = next(r for r in record["alternatives"] if r["plan_id"] == plan_id)
        dec = record["decomposition"]
        rec = row["reconstruction"]
        coefficients = rec.get("coefficients")
        return cls(
            plan_id=plan_id,
            kept=list(rec["kept"]),
            rebuilt=list(rec["rebuilt"]),
            center=dict(dec["center"]),
            scale=dict(dec["scale"]),
            coefficients=None if coefficients is None else np.array(coefficients, dtype=float).reshape(len(rec["kept"]), len(rec["rebuilt"])),
            spe_limit=rec.get("spe_limit"),
            **_provenance(record),
        )

    @property
    def k(self) -> int:
        return len(self.kept)

    @property
    def columns(self) -> list[str]:
        return self.kept + self.rebuilt

    def required_columns(self) -> list[str]:
        return list(self.kept)

    def spe_computable(self, columns) -> bool:
        """Whether rows with these columns get an SPE: when the record holds the
        coefficients and the left-out features are among them too."""
        return self.coefficients is not None and all(c in columns for c in self.rebuilt)

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        return np.array(self.kept, dtype=object)

    def fit(self, x=None, y=None) -> "FeaturePlan":
        """A recorded plan is already fitted; present for pipeline compatibility."""
        return self

    def _read(self, frame) -> tuple[np.ndarray, np.ndarray | None]:
        """The kept columns and, when all present (and the record holds the coefficients),
        the others, in their own units."""
        if not isinstance(frame, pd.DataFrame):
            values = np.asarray(frame, dtype=float)
            if values.ndim != 2 or values.shape[1] not in (len(self.kept), len(self.columns)):
                raise InputError(f"expected {len(self.kept)} or {len(self.columns)} feature columns, got {values.shape}",
                                 "pass the plan's kept columns, or all its columns, in order")
            frame = pd.DataFrame(values, columns=self.columns[: values.shape[1]])
        missing = [c for c in self.kept if c not in frame.columns]
        if missing:
            raise InputError(
                f"the data lacks {len(missing)} kept column(s) of the plan: {', '.join(missing[:10])}",
                "give a table with the columns the plan keeps",
            )
        kept = _numbers(frame, self.kept)
        if not self.spe_computable(frame.columns):
            return kept, None
        return kept, _numbers(frame, self.rebuilt)

    def _scaled(self, values: np.ndarray, columns: list[str]) -> np.ndarray:
        """(x - center) / scale of some columns, in the record's scaled units."""
        return (values - [self.center[c] for c in columns]) / [self.scale[c] for c in columns]

    def transform(self, frame) -> np.ndarray:
        """The kept columns of the rows, in their own units."""
        return self._read(frame)[0]

    def score_rows(self, frame) -> pd.DataFrame:
        """The kept columns, ``spe`` and ``beyond_limit`` (1 beyond the 95% SPE limit); both
        empty when the other feature columns are not given."""
        kept, rebuilt = self._read(frame)
        out = pd.DataFrame(kept, columns=self.kept)
        if rebuilt is None:
            out["spe"] = np.nan
            out["beyond_limit"] = pd.Series([pd.NA] * len(out), dtype="Int64")
            return out
        z_kept, z_rebuilt = self._scaled(kept, self.kept), self._scaled(rebuilt, self.rebuilt)
        residual = z_rebuilt - z_kept @ self.coefficients  # the kept columns rebuild themselves exactly
        spe = np.sum(residual**2, axis=1)
        out["spe"] = spe
        beyond = spe_beyond(spe, self.spe_limit, np.sum(z_kept**2, axis=1) + np.sum(z_rebuilt**2, axis=1))
        out["beyond_limit"] = limit_flags(beyond, spe)
        return out


def plan_from_record(record: dict):
    """The plan the record chose: the components, or a plan that keeps original features."""
    chosen = (record.get("plan_choice") or {}).get("chosen", "components")
    if chosen == "components":
        return ReductionPlan.from_record(record)
    return FeaturePlan.from_record(record, chosen)
