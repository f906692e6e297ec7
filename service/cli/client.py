"""A small HTTP client of a foldwise server for the analysts' commands.

The URL and token come from FOLDWISE_URL / FOLDWISE_TOKEN, or else from FOLDWISE_HOME/client.json
(written by `foldwise login`, readable by its owner only, since it holds a bearer token).
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx

from service.errors import BadInput

CONFIG_NAME = "client.json"
TIMEOUT = 60.0


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
    """GET requests to one server with one token; 4xx become BadInput, the rest ServerFailed."""

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
