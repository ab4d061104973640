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
            id_column=record["input"].get("id_column"),
            record_id=record.get("record_id"),
            status=record.get("status"),
        )

    @property
    def k(self) -> int:
        return self.loadings.shape[1]

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
            values = frame[self.columns].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
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
        beyond = np.zeros(len(out), dtype=bool)
        if self.spe_limit is not None:
            beyond |= spe > self.spe_limit
        if self.t2_limit is not None:
            beyond |= t2 > self.t2_limit
        flag = pd.Series(beyond.astype(int), dtype="Int64")
        flag[np.isnan(spe)] = pd.NA
        out["beyond_limit"] = flag
        return out


@dataclass
class FeaturePlan:
    """A recorded plan that keeps original features (``feature_subset`` or ``vif_pruning``).

    ``transform`` gives the kept columns as they are; ``score_rows`` adds the SPE of the
    row's reconstruction from them, z_hat = z_kept B in the scaled units of the record
    (z = (x - center) / scale), and a flag beyond the plan's 95% SPE limit.
    """

    plan_id: str
    columns: list[str]
    kept: list[str]
    center: np.ndarray
    scale: np.ndarray
    coefficients: np.ndarray  # (len(kept), len(columns))
    spe_limit: float | None
    id_column: str | None = None
    record_id: str | None = None
    status: str | None = None

    @classmethod
    def from_record(cls, record: dict, plan_id: str) -> "FeaturePlan":
        row = next(r for r in record["alternatives"] if r["plan_id"] == plan_id)
        dec = record["decomposition"]
        columns = list(record["input"]["columns_used"])
        rec = row["reconstruction"]
        return cls(
            plan_id=plan_id,
            columns=columns,
            kept=list(rec["kept"]),
            center=np.array([dec["center"][c] for c in columns], dtype=float),
            scale=np.array([dec["scale"][c] for c in columns], dtype=float),
            coefficients=np.array(rec["coefficients"], dtype=float).reshape(len(rec["kept"]), len(columns)),
            spe_limit=rec.get("spe_limit"),
            id_column=record["input"].get("id_column"),
            record_id=record.get("record_id"),
            status=record.get("status"),
        )

    @property
    def k(self) -> int:
        return len(self.kept)

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        return np.array(self.kept, dtype=object)

    def fit(self, x=None, y=None) -> "FeaturePlan":
        """A recorded plan is already fitted; present for pipeline compatibility."""
        return self

    def _matrix(self, frame) -> np.ndarray:
        return ReductionPlan._matrix(self, frame)  # the same checks: every feature column is read

    def transform(self, frame) -> np.ndarray:
        """The kept columns of the rows, in their own units."""
        x = self._matrix(frame)
        return x[:, [self.columns.index(c) for c in self.kept]]

    def score_rows(self, frame) -> pd.DataFrame:
        """The kept columns, ``spe`` and ``beyond_limit`` (1 beyond the 95% SPE limit)."""
        x = self._matrix(frame)
        z = (x - self.center) / self.scale
        kept = [self.columns.index(c) for c in self.kept]
        residual = z - z[:, kept] @ self.coefficients
        spe = np.sum(residual**2, axis=1)
        out = pd.DataFrame(x[:, kept], columns=self.kept)
        out["spe"] = spe
        beyond = spe > self.spe_limit if self.spe_limit is not None else np.zeros(len(out), dtype=bool)
        flag = pd.Series(beyond.astype(int), dtype="Int64")
        flag[np.isnan(spe)] = pd.NA
        out["beyond_limit"] = flag
        return out


def plan_from_record(record: dict):
    """The plan the record chose: the components, or a plan that keeps original features."""
    chosen = (record.get("plan_choice") or {}).get("chosen", "components")
    if chosen == "components":
        return ReductionPlan.from_record(record)
    return FeaturePlan.from_record(record, chosen)
