"""A small client of the linkfold HTTP API, for other projects: IDs without touching the database.

    from linkfold.client import Client
    lf = Client("http://127.0.0.1:8750", token="lf_…")
    lf.lookup("https://harbour-gazette.example/2031/05/tide-barrier-vote?utm_source=feed")["article_id"]

``lookup_many`` sends any number of URLs in batches of at most the server's limit and yields the answers
in input order as they stream back; ``add_ids`` adds ``article_id`` / ``story_id`` and the final columns
(``final_url``, ``final_domain``, ``final_outlet``, ``final_is_article``: what each link stands for after
short links and redirects) to a pandas DataFrame of URLs. Errors from the server raise :class:`ApiError` with the envelope's code and message.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Iterator
from datetime import datetime
from typing import Any

import httpx

from .errors import LinkfoldError, NetworkError
from .settings import load_settings

DEFAULT_BATCH = 10000  # the server's default api_max_batch
#: What a link stands for (the names of ``linkfold lookup``, the export and the ``sighting_links`` view).
FINAL_FIELDS = ("final_url", "final_domain", "final_outlet", "final_is_article")
#: The columns ``add_ids`` adds unless told otherwise.
ID_FIELDS = ("article_id", "story_id", *FINAL_FIELDS)


class ApiError(LinkfoldError):
    """The server answered with an error envelope; ``status`` is the HTTP status, ``code`` its code."""

    exit_code = 9

    def __init__(self, status: int, code: str, message: str) -> None:
        super().__init__(f"HTTP {status} {code}: {message}")
        self.status = status
        self.code = code
        self.server_message = message


class Client:
    """The API at ``base_url`` (default: the ``api_url`` setting) with a bearer ``token``.

    One connection pool for the client's life; use it as a context manager or call :meth:`close`.
    """

    def __init__(self, base_url: str | None = None, *, token: str | None = None, timeout: float = 60.0,
                 batch_size: int = DEFAULT_BATCH, transport: httpx.BaseTransport | None = None) -> None:
        if base_url is None:
            base_url = load_settings().api_url
        if batch_size < 1:
            raise ValueError("batch_size must be at least 1")
        headers = {"Accept": "application/json"}
        if token:
            headers["Authorization"] = f"Bearer {token}"
        self.base_url = base_url.rstrip("/")
        self.batch_size = batch_size
        # trust_env=False: no proxy from the environment, and no credentials from ~/.netrc, are ever
        # mixed into requests to the registry.
        self._http = httpx.Client(base_url=self.base_url + "/v1", headers=headers, timeout=timeout,
                                  transport=transport, trust_env=False)

    # --- plumbing ------------------------------------------------------------------------------------------
    def __enter__(self) -> Client:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        self._http.close()

    def _check(self, response: httpx.Response) -> httpx.Response:
        if response.is_success:
            return response
        response.read()
        try:
            err = response.json()["error"]
            code, message = str(err["code"]), str(err["message"])
        except (ValueError, KeyError, TypeError):
            code, message = "http", response.text[:200] or response.reason_phrase
        raise ApiError(response.status_code, code, message)

    def _get(self, path: str, **params: Any) -> Any:
        try:
            response = self._http.get(path, params={k: v for k, v in params.items() if v is not None})
        except httpx.TransportError as exc:
            raise NetworkError(f"cannot reach the linkfold API at {self.base_url}: {exc}") from exc
        return self._check(response).json()

    # --- the three calls -----------------------------------------------------------------------------------
    def lookup(self, item: str) -> dict[str, Any]:
        """What the registry knows about one URL, url key or ID (``linkfold lookup``'s fields; for an ID,
        ``cluster`` holds its members, outlets, title and founder)."""
        return self._get("/lookup", q=item)

    def lookup_many(self, items: Iterable[str]) -> Iterator[dict[str, Any]]:
        """One answer per item, in order, for any number of items (sent ``batch_size`` at a time)."""
        batch: list[str] = []
        for item in items:
            batch.append(item)
            if len(batch) >= self.batch_size:
                yield from self._batch(batch)
                batch = []
        if batch:
            yield from self._batch(batch)

    def article(self, article_id: str) -> dict[str, Any]:
        """An article with its members, links and decisions; a retired ID answers with ``moved`` true
        and ``current`` the ID it maps to now."""
        return self._get(f"/articles/{_path_part(article_id)}")

    # --- more of the API --------------------------------------------------------------------------------------
    def story(self, story_id: str) -> dict[str, Any]:
        return self._get(f"/stories/{_path_part(story_id)}")

    def history(self, cluster_id: str) -> dict[str, Any]:
        return self._get(f"/ids/{_path_part(cluster_id)}/history")

    def datasets(self) -> list[dict[str, Any]]:
        return self._get("/datasets")["datasets"]

    def clusters(self, *, level: str = "article", min_size: int = 2, outlet: str | None = None,
                 limit: int = 100) -> list[dict[str, Any]]:
        return self._get("/clusters", level=level, min_size=min_size, outlet=outlet, limit=limit)["clusters"]

    def outlets(self, *, dataset: str | None = None, listed: bool = False) -> Any:
        """The outlet table (``GET /v1/outlets``) as a pandas DataFrame: one row per outlet, its attribute
        columns and counts; ``frame.attrs`` holds ``list_version``, ``attributes`` and ``summary``."""
        body = self._get("/outlets", dataset=dataset, listed=listed or None)
        return _frame(body, "outlets", ["outlet", *body["attributes"], "datasets", "sightings", "units", "urls",
                                        "articles", "stories", "listed"])

    def outlet_report(self, *, dataset: str | None = None, outlet: str | None = None, shapes: int = 5) -> Any:
        """The coverage report (``GET /v1/outlets/report``) as a DataFrame, one row per outlet; ``shapes`` is
        a list of {shape, sightings, urls} per row; ``frame.attrs["summary"]`` has the short-link counts."""
        body = self._get("/outlets/report", dataset=dataset, outlet=outlet, shapes=shapes)
        return _frame(body, "outlets", None)

    def decide(self, verdict: str, a: str, b: str, *, decided_by: str, note: str | None = None,
               level: str | None = None) -> dict[str, Any]:
        """Record a manual decision (needs a write token); it takes effect at the next dedupe run. The
        answer's ``level``, ``level_reason`` and ``effect`` say what was recorded and what it changes."""
        body = {"verdict": verdict, "a": a, "b": b, "decided_by": decided_by, "note": note, "level": level}
        try:
            response = self._http.post("/decisions", json=body)
        except httpx.TransportError as exc:
            raise NetworkError(f"cannot reach the linkfold API at {self.base_url}: {exc}") from exc
        return self._check(response).json()

    def network(self, dataset: str | Iterable[str], *, min_units: int | None = None,
                all_urls: bool = False) -> tuple[Any, Any]:
        """The outlet co-exposure network as two pandas DataFrames, ``(edges, nodes)``: edges with
        ``outlet_a``, ``outlet_b``, ``units``, ``jaccard``, ``lift``, ``pmi``; nodes with ``outlet``,
        ``units``, ``sightings`` and the outlet list's attributes. The server never goes below its
        documented minimum of units (docs/network.md). The other fields of the answer (``units``: N,
        ``min_units``, ``suppressed_nodes``) are in each frame's ``attrs``."""
        import pandas as pd

        names = [dataset] if isinstance(dataset, str) else list(dataset)
        try:
            response = self._http.get("/network", params=_params(dataset=names, min_units=min_units,
                                                                 all_urls="true" if all_urls else None))
        except httpx.TransportError as exc:
            raise NetworkError(f"cannot reach the linkfold API at {self.base_url}: {exc}") from exc
        answer = self._check(response).json()
        edges = pd.DataFrame(answer["edges"], columns=answer["edge_columns"])
        nodes = pd.DataFrame(answer["nodes"], columns=answer["node_columns"])
        meta = {k: answer[k] for k in ("datasets", "min_units", "all_urls", "units", "suppressed_nodes")}
        edges.attrs.update(meta)
        nodes.attrs.update(meta)
        return edges, nodes

    # --- exposure (docs/exposure.md) ----------------------------------------------------------------------
    def exposure(self, datasets: str | Iterable[str], *, level: str = "outlet", by: str | None = None,
                 all_urls: bool = False) -> Any:
        """The unit-level exposure table as a pandas DataFrame (needs a ``units`` token): one row per unit ×
        outlet (or article, story) (× period), columns as ``linkfold exposure`` writes them; ``first_seen``
        and ``last_seen`` as UTC times."""
        pd = _pandas("exposure")
        names = [datasets] if isinstance(datasets, str) else list(datasets)
        target = {"outlet": "outlet", "article": "article_id", "story": "story_id"}.get(level, level)
        columns = (["dataset"] if len(set(names)) > 1 else []) + ["unit", target] + (["period"] if by else [])
        columns += ["sightings", "first_seen", "last_seen"]
        rows: list[dict[str, Any]] = []
        params: dict[str, Any] = {"dataset": names, "level": level, "all_urls": str(all_urls).lower()}
        if by is not None:
            params["by"] = by
        try:
            with self._http.stream("GET", "/exposure", params=params,
                                   headers={"Accept": "application/x-ndjson"}) as response:
                self._check(response)
                for line in response.iter_lines():
                    if not line:
                        continue
                    row = json.loads(line)
                    if "error" in row and isinstance(row["error"], dict):
                        raise ApiError(response.status_code, row["error"]["code"], row["error"]["message"])
                    rows.append(row)
        except httpx.TransportError as exc:
            raise NetworkError(f"the exposure table from {self.base_url} broke off after {len(rows):,} rows: "
                               f"{exc}") from exc
        extra = [c for c in (rows[0] if rows else {}) if c not in columns]  # the outlet list's attributes
        frame = pd.DataFrame(rows, columns=columns + extra)
        for col in ("first_seen", "last_seen"):
            frame[col] = pd.to_datetime(frame[col], utc=True, format="ISO8601")
        return frame

    def outlet_exposure(self, datasets: str | Iterable[str], *, by: str | None = None, all_urls: bool = False,
                        min_units: int | None = None) -> Any:
        """Units and sightings per outlet (× period) as a pandas DataFrame, groups of fewer than the server's
        minimum of units left out (a read token is enough; no unit-level rows). The number left out is in
        ``frame.attrs["suppressed_groups"]``."""
        pd = _pandas("outlet_exposure")
        names = [datasets] if isinstance(datasets, str) else list(datasets)
        answer = self._get("/exposure/outlets", dataset=names, by=by, all_urls=str(all_urls).lower(),
                           min_units=min_units)
        frame = pd.DataFrame(answer["rows"], columns=answer["columns"])
        frame.attrs["suppressed_groups"] = answer["suppressed_groups"]
        frame.attrs["min_units"] = answer["min_units"]
        return frame

    # --- the corpus and the comparison of datasets (docs/corpus.md) -------------------------------------
    def corpus(self, datasets: str | Iterable[str] | None = None, *, level: str = "story",
               language: str | None = None, min_words: int = 0, all_urls: bool = False,
               min_units: int | None = None, tokens: bool = False, lowercase: bool = False,
               drop_stop_words: bool = False, ngrams: int = 1) -> Iterator[dict[str, Any]]:
        """The corpus, one record (a dict, as ``linkfold corpus`` writes a JSON line, with times as aware
        datetimes) per story or article seen in ``datasets`` (default: every dataset), streamed as the
        server sends it. A read token is enough: unit counts below the server's minimum are None."""
        names = [datasets] if isinstance(datasets, str) else list(datasets or [])
        params = _params(dataset=names, level=level, language=language, min_words=min_words or None,
                         all_urls="true" if all_urls else None, min_units=min_units,
                         tokens="true" if tokens else None, lowercase="true" if lowercase else None,
                         drop_stop_words="true" if drop_stop_words else None,
                         ngrams=ngrams if ngrams > 1 else None)
        n = 0
        try:
            with self._http.stream("GET", "/corpus", params=params,
                                   headers={"Accept": "application/x-ndjson"}) as response:
                self._check(response)
                for line in response.iter_lines():
                    if not line:
                        continue
                    record = json.loads(line)
                    if "error" in record and isinstance(record["error"], dict):
                        raise ApiError(response.status_code, record["error"]["code"], record["error"]["message"])
                    n += 1
                    yield _corpus_times(record)
        except httpx.TransportError as exc:
            raise NetworkError(f"the corpus from {self.base_url} broke off after {n:,} records: {exc}") from exc

    def corpus_frame(self, datasets: str | Iterable[str] | None = None, **options: Any) -> Any:
        """:meth:`corpus` as a pandas DataFrame: one row per record, ``datasets`` a column of lists of dicts
        (``frame.explode("datasets")`` gives one row per record and dataset)."""
        pd = _pandas("corpus_frame")
        return pd.DataFrame(list(self.corpus(datasets, **options)))

    def compare(self, datasets: Iterable[str], *, level: str = "story", top: int | None = None,
                all_urls: bool = False, min_units: int | None = None) -> dict[str, Any]:
        """Datasets side by side (``linkfold compare``) as the API's JSON: ``datasets``, ``outlets``,
        ``attributes``, ``overlap``, ``top``, ``only`` (lists of dicts), ``level``, ``min_units``,
        ``suppressed``."""
        return self._get("/compare", dataset=list(datasets), level=level, top=top,
                         all_urls="true" if all_urls else None, min_units=min_units)

    def _batch(self, batch: list[str]) -> Iterator[dict[str, Any]]:
        n = 0
        try:
            with self._http.stream("POST", "/lookup", json={"urls": batch},
                                   headers={"Accept": "application/x-ndjson"}) as response:
                self._check(response)
                for line in response.iter_lines():
                    if not line:
                        continue
                    answer = json.loads(line)
                    if "error" in answer and isinstance(answer["error"], dict):
                        # The server failed after the stream began: it says so in a last line.
                        raise ApiError(response.status_code, answer["error"]["code"], answer["error"]["message"])
                    n += 1
                    yield answer
        except httpx.TransportError as exc:
            raise NetworkError(f"the batch lookup from {self.base_url} broke off after {n:,} of "
                               f"{len(batch):,} answers: {exc}") from exc
        if n != len(batch):
            raise NetworkError(f"the batch lookup from {self.base_url} ended after {n:,} of {len(batch):,} answers")


def _frame(body: dict[str, Any], key: str, columns: list[str] | None) -> Any:
    try:
        import pandas as pd
    except ImportError as exc:  # pragma: no cover - exercised only where pandas is absent
        raise ImportError("this call returns a DataFrame and needs pandas: pip install pandas") from exc
    frame = pd.DataFrame(body[key], columns=columns) if columns else pd.DataFrame(body[key])
    frame.attrs.update({k: v for k, v in body.items() if k != key})
    return frame


def _corpus_times(record: dict[str, Any]) -> dict[str, Any]:
    for key in ("published", "first_seen", "last_seen"):
        if isinstance(record.get(key), str):
            record[key] = datetime.fromisoformat(record[key])
    for entry in record.get("datasets") or []:
        for key in ("first_seen", "last_seen"):
            if isinstance(entry.get(key), str):
                entry[key] = datetime.fromisoformat(entry[key])
    return record


def _params(**params: Any) -> list[tuple[str, Any]]:
    """Query parameters without the unset ones; a list value repeats its name."""
    out: list[tuple[str, Any]] = []
    for name, value in params.items():
        if value is None:
            continue
        out += [(name, v) for v in value] if isinstance(value, list) else [(name, value)]
    return out


def _pandas(what: str) -> Any:
    try:
        import pandas as pd
    except ImportError as exc:  # pragma: no cover - exercised only where pandas is absent
        raise ImportError(f"{what} returns a DataFrame and needs pandas: pip install pandas") from exc
    return pd


def _path_part(text: str) -> str:
    from urllib.parse import quote

    return quote(text.strip(), safe="")


def add_ids(frame: Any, column: str = "url", *, client: Client, prefix: str = "",
            fields: Iterable[str] = ID_FIELDS) -> Any:
    """A copy of a pandas DataFrame with a column per lookup field in ``fields`` (by default ``article_id``,
    ``story_id`` and the final columns, :data:`ID_FIELDS`) for the URLs in ``column``.

    Each distinct URL is looked up once. Rows whose URL is missing (NaN/None) get missing values, and so
    do the final columns of a short link not yet followed. pandas is imported only here, so the rest of
    the client works without it.
    """
    try:
        import pandas as pd
    except ImportError as exc:  # pragma: no cover - exercised only where pandas is absent
        raise ImportError("add_ids needs pandas: pip install pandas") from exc
    if column not in frame.columns:
        raise KeyError(f"no column {column!r} in the DataFrame (columns: {', '.join(map(str, frame.columns))})")
    fields = tuple(fields)
    values = frame[column]
    present = values.notna()
    distinct = list(dict.fromkeys(str(v) for v in values[present]))
    answers = dict(zip(distinct, client.lookup_many(distinct), strict=True))
    out = frame.copy()
    for field in fields:
        mapped = pd.Series(values[present].map(lambda v, f=field: answers[str(v)].get(f)),
                           index=frame.index).astype("object")
        out[prefix + field] = mapped.where(present & mapped.notna(), None)  # None, not NaN, for no value
    return out


__all__ = ["FINAL_FIELDS", "ID_FIELDS", "ApiError", "Client", "add_ids"]
