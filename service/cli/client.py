"""A small typed HTTP client of a foldwise server, used by the command line and by team services.

The URL and token come from FOLDWISE_URL / FOLDWISE_TOKEN, or else from FOLDWISE_HOME/client.json
(written by `foldwise login`, readable by its owner only, since it holds a bearer token); a
service passes them directly with `Client.connect(url, token)`. A 4xx answer raises BadInput
(the problem's field and sentence), an unreachable server or a 5xx ServerFailed.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx

from service.errors import BadInput

CONFIG_NAME = "client.json"
TIMEOUT = 60.0
PAGE = 1000
ENDED = ("succeeded", "failed", "cancelled")


class ServerFailed(Exception):
    """The server could not be reached or answered with a 5xx: not the caller's input."""


@dataclass(frozen=True)
class ClientConfig:
    """Where the server is and the token to show it."""

    url: str
    token: str


def config_path(env: Mapping[str, str] | None = None) -> Path:
    """FOLDWISE_HOME/client.json (FOLDWISE_HOME defaults to ./.foldwise)."""
    env = os.environ if env is None else env
    return Path(env.get("FOLDWISE_HOME") or ".foldwise").expanduser() / CONFIG_NAME


def save_config(config: ClientConfig, env: Mapping[str, str] | None = None) -> Path:
    """Write client.json with mode 0600, created that way so the token is never world-readable."""
    if not config.url.startswith(("http://", "https://")):
        raise BadInput("--url", "give the server's address starting with http:// or https://.")
    if not config.token.strip():
        raise BadInput("--token", "give a token from `foldwise token create`.")
    path = config_path(env)
    path.parent.mkdir(parents=True, exist_ok=True)
    text = json.dumps({"url": config.url.rstrip("/"), "token": config.token}, indent=2)
    descriptor = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    with os.fdopen(descriptor, "w", encoding="utf-8") as out:
        out.write(text + "\n")
    os.chmod(path, 0o600)  # an existing file keeps its old mode through O_CREAT
    return path


def load_config(env: Mapping[str, str] | None = None) -> ClientConfig:
    """The environment wins over client.json; BadInput names what is missing."""
    env = os.environ if env is None else env
    url, token = env.get("FOLDWISE_URL"), env.get("FOLDWISE_TOKEN")
    path = config_path(env)
    if (not url or not token) and path.is_file():
        try:
            stored = json.loads(path.read_text(encoding="utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError):
            raise BadInput(str(path), "is not valid JSON; run `foldwise login` again.") from None
        url = url or stored.get("url")
        token = token or stored.get("token")
    if not url:
        raise BadInput("FOLDWISE_URL", "set it or run `foldwise login --url URL --token TOKEN`.")
    if not token:
        raise BadInput("FOLDWISE_TOKEN", "set it or run `foldwise login --url URL --token TOKEN`.")
    return ClientConfig(url.rstrip("/"), token)


def _problem_sentence(answer: httpx.Response) -> str:
    try:
        body = answer.json()
    except ValueError:
        body = None
    if isinstance(body, dict) and body.get("detail"):
        return str(body["detail"])
    return f"the server answered {answer.status_code} {answer.reason_phrase}."


def _check(answer: httpx.Response) -> httpx.Response:
    if answer.status_code >= 500:
        raise ServerFailed(f"the server answered {answer.status_code}: {_problem_sentence(answer)}")
    if answer.status_code >= 400:
        try:
            field = answer.json().get("field")
        except ValueError:
            field = None
        raise BadInput(str(field or ""), _problem_sentence(answer))
    return answer


class Client:
    """Requests to one server with one token; 4xx become BadInput, the rest ServerFailed."""

    @classmethod
    def connect(cls, url: str, token: str) -> Client:
        """A client of the server at `url` showing `token` (use it in a `with` block)."""
        return cls(ClientConfig(url.rstrip("/"), token))

    def __init__(self, config: ClientConfig) -> None:
        self.config = config
        self._http = httpx.Client(
            base_url=config.url,
            headers={"Authorization": f"Bearer {config.token}"},
            timeout=TIMEOUT,
        )

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *exc: object) -> None:
        self._http.close()

    def get(self, path: str, **params: Any) -> Any:
        """The JSON body of GET path?params."""
        query = {k: v for k, v in params.items() if v is not None}
        try:
            answer = self._http.get(path, params=query)
        except httpx.TransportError as exc:
            raise ServerFailed(f"cannot reach {self.config.url} ({exc}).") from None
        return _check(answer).json()

    def stream(self, path: str) -> Iterator[bytes]:
        """The body of GET path, chunk by chunk, without holding it all."""
        try:
            with self._http.stream("GET", path) as answer:
                if answer.status_code >= 400:
                    answer.read()
                    _check(answer)
                yield from answer.iter_bytes()
        except httpx.TransportError as exc:
            raise ServerFailed(f"cannot reach {self.config.url} ({exc}).") from None

    def post(self, path: str, body: Any, headers: Mapping[str, str] | None = None) -> Any:
        """The JSON body of POST path with a JSON body."""
        try:
            answer = self._http.post(path, json=body, headers=dict(headers or {}))
        except httpx.TransportError as exc:
            raise ServerFailed(f"cannot reach {self.config.url} ({exc}).") from None
        return _check(answer).json()

    def submit(self, request: Mapping[str, Any], idempotency_key: str | None = None) -> dict:
        """Submit job request v1; the same key and body give back the same job, never a twin."""
        headers = {"Idempotency-Key": idempotency_key} if idempotency_key else {}
        job: dict[str, Any] = self.post("/v1/jobs", dict(request), headers)
        return job

    def job(self, job_id: str) -> dict[str, Any]:
        """The job as GET /v1/jobs/{id} shows it (status, progress, result once succeeded)."""
        job: dict[str, Any] = self.get(f"/v1/jobs/{job_id}")
        return job

    def wait(
        self,
        job_id: str,
        progress: Callable[[int, int], None] | None = None,
        *,
        poll_seconds: float = 1.0,
        timeout: float | None = None,
    ) -> dict[str, Any]:
        """Poll until the job ends, calling progress(units_done, units_total) on each look."""
        deadline = None if timeout is None else time.monotonic() + timeout
        while True:
            job = self.job(job_id)
            if progress is not None:
                progress(job["progress"]["units_done"], job["progress"]["units_total"])
            if job["status"] in ENDED:
                return job
            if deadline is not None and time.monotonic() > deadline:
                raise ServerFailed(f"job {job_id} is still {job['status']} after {timeout} s.")
            time.sleep(poll_seconds)

    def result(self, job_id: str) -> dict[str, Any]:
        """Result v1 of a succeeded job (BadInput saying why for any other status)."""
        job = self.job(job_id)
        if job["status"] != "succeeded":
            detail = f": {job['error']}" if job.get("error") else ""
            raise BadInput("JOB", f"job {job_id} is {job['status']}, so it has no result{detail}.")
        result: dict[str, Any] = job["result"]
        return result

    def _pages(self, path: str, **params: Any) -> Iterator[dict[str, Any]]:
        after = 0
        while True:
            page = self.get(path, after=after, limit=PAGE, **params)
            yield from page["data"]
            if page["next_after"] is None:
                return
            after = page["next_after"]

    def fold_scores(self, job_id: str, *, all_metrics: bool = False) -> Iterator[dict[str, Any]]:
        """Every fold score of the job, page by page (only its own metrics unless asked)."""
        params = {"all_metrics": "true"} if all_metrics else {}
        return self._pages(f"/v1/jobs/{job_id}/fold-scores", **params)

    def predictions(self, job_id: str) -> Iterator[dict[str, Any]]:
        """Every outer test row's prediction, page by page."""
        return self._pages(f"/v1/jobs/{job_id}/predictions")

    def download_model(self, job_id: str, path: Path | str) -> str:
        """Write the final model (skops) to `path`; returns its sha256, checked against the
        server's header and result v1 before the file is kept."""
        target = Path(path)
        partial = target.with_name(target.name + ".partial")
        digest = hashlib.sha256()
        try:
            with self._http.stream("GET", f"/v1/jobs/{job_id}/model") as answer:
                if answer.status_code >= 400:
                    answer.read()
                    _check(answer)
                announced = answer.headers.get("X-Model-Sha256", "")
                with partial.open("wb") as out:
                    for chunk in answer.iter_bytes():
                        digest.update(chunk)
                        out.write(chunk)
        except httpx.TransportError as exc:
            raise ServerFailed(f"cannot reach {self.config.url} ({exc}).") from None
        expected = self.result(job_id)["final_pick"]["model_sha256"]
        if digest.hexdigest() != announced or announced != expected:
            partial.unlink(missing_ok=True)
            raise ServerFailed(f"the model of job {job_id} arrived damaged (sha256 differs).")
        partial.replace(target)
        return expected

    def model_card(self, job_id: str) -> dict[str, Any]:
        """The model card as JSON."""
        card: dict[str, Any] = self.get(f"/v1/jobs/{job_id}/model-card")
        return card

    def model_card_markdown(self, job_id: str) -> str:
        """The model card as Markdown."""
        return b"".join(self.stream(f"/v1/jobs/{job_id}/model-card.md")).decode("utf-8")

    def compare(self, first: str, second: str) -> dict[str, Any]:
        """Two jobs on one dataset compared fold by fold (GET /v1/compare)."""
        comparison: dict[str, Any] = self.get("/v1/compare", jobs=f"{first},{second}")
        return comparison
