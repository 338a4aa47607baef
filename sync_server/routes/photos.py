"""Photo files: which ones the camp lacks, and their resumable upload with the tus protocol's semantics (version
1.0.0, tus.io/protocols/resumable-upload): ``POST`` creates an upload (``Upload-Length``, the "Creation"
extension), ``HEAD`` says where it stands (``Upload-Offset``, never cached), ``PATCH`` appends a chunk of
``application/offset+octet-stream`` at its ``Upload-Offset`` (204 with the new offset; 409 when the offset is not
where the upload stands; 415 for another content type). Every request and answer but OPTIONS carries
``Tus-Resumable: 1.0.0``; another version is answered 412 with ``Tus-Version``. The upload's URL is the photo's
hash, so a tablet that lost everything but the file can resume. When the last byte is in, the file is hashed:
bytes that do not hash to their name are discarded and answered 460 (the status the tus "Checksum" extension
gives a checksum mismatch). The creation request may carry the first chunk (the tus "Creation With Upload"
extension), so a photo that fits in one chunk takes one request; ``/missing`` says which uploads were begun
already, so a tablet resumes those with PATCH from where they stand and sends nothing twice.

The usual upload is handled on the event loop alone: ``/missing`` looks up in one query which of the hashes it
lists have photo records (remembered, so that each creation needs no query of its own), the upload is begun and
its chunk written as it streams in and hashed while it is flushed (the flush waits in another thread), and a
complete JPEG or PNG is checked and renamed where its last byte arrived. Only the rest goes to a worker thread: a hash not remembered (its record is looked up), a photo
another request holds, a file to hash again after a restart, an image of another format to decode whole.
"""

from __future__ import annotations

import base64
import re
from typing import Annotated

from fastapi import APIRouter, Depends, Header, Path, Request, Response
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import FileResponse, JSONResponse
from pydantic import BaseModel, ConfigDict, Field
import sqlalchemy as sa

from schema.errors import PhotoError, RecordNotFound, UploadMismatch
from schema.records import Device
from schema.records.photo import MAX_PHOTO_BYTES
from schema.tables import metadata

from ..auth import require
from ..photos import OffsetMismatch, PhotoVault, UploadState

router = APIRouter(prefix="/v1/photos", tags=["photos"])

TUS_VERSION = "1.0.0"
Uploader = Annotated[Device, Depends(require("recorder", "manager"))]
Reader = Annotated[Device, Depends(require("recorder", "manager", "analyst"))]
Sha = Annotated[str, Path(pattern=r"^[0-9a-f]{64}$", description="the photo's SHA-256 (64 lower-case hex digits)")]
# Tus-Resumable is read from the request itself (another version is answered 412, as tus says, not 422) and
# declared in the OpenAPI schema here.
_TUS_PARAM = {"parameters": [{"name": "Tus-Resumable", "in": "header", "required": True, "description":
                              "the tus protocol version the client speaks", "schema": {"type": "string",
                                                                                       "enum": [TUS_VERSION]}}]}
_CHUNK_BODY = {**_TUS_PARAM, "requestBody": {"required": True, "content": {"application/offset+octet-stream": {
    "schema": {"type": "string", "format": "binary"}}}}}
_CHUNK_BODY_OPTIONAL = {**_CHUNK_BODY, "requestBody": {**_CHUNK_BODY["requestBody"], "required": False}}

_TUS = {"Tus-Resumable": {"description": "the tus protocol version: 1.0.0", "schema": {"type": "string"}}}
_OFFSET = {**_TUS, "Upload-Offset": {"description": "bytes of the photo the server holds", "schema": {"type": "integer"}}}
_LENGTH = {**_OFFSET, "Upload-Length": {"description": "the photo's size in bytes", "schema": {"type": "integer"}}}
_ERR = {"content": {"application/json": {}}}


class MissingAsk(BaseModel):
    """The hashes of the photos a tablet holds."""

    model_config = ConfigDict(extra="forbid")
    hashes: list[Annotated[str, Field(pattern=r"^[0-9a-f]{64}$")]] = Field(max_length=500)


class MissingAnswer(BaseModel):
    missing: list[str] = Field(description="the hashes of those photos whose files this server does not hold")
    begun: dict[str, int] = Field(default_factory=dict, description="of those, the uploads already begun: hash -> "
                                  "bytes held (resume them with PATCH from there; the others may send their first "
                                  "chunk with the creation request)")
    max_chunk_bytes: int = Field(description="the largest chunk (PATCH body) this server takes")


def _vault(request: Request) -> PhotoVault:
    return request.app.state.photos  # type: ignore[no-any-return]


def _tus(answer: Response, state: UploadState | None = None, *, length: bool = False) -> Response:
    answer.headers["Tus-Resumable"] = TUS_VERSION
    answer.headers["Cache-Control"] = "no-store"
    if state is not None:
        answer.headers["Upload-Offset"] = str(state.offset)
        if length:
            answer.headers["Upload-Length"] = str(state.length)
    return answer


def _refused(status: int, code: str, message: str, **headers: str) -> JSONResponse:
    return _tus(JSONResponse({"code": code, "message": message}, status_code=status, headers=headers or None))  # type: ignore[return-value]


def _version_refused(request: Request) -> JSONResponse | None:
    """None for tus 1.0.0; 412 (with Tus-Version, as tus says) for another version; 400 when the header is missing
    or is no version."""
    version = request.headers.get("tus-resumable")
    if version == TUS_VERSION:
        return None
    if version is None or not re.fullmatch(r"\d{1,3}\.\d{1,3}\.\d{1,3}", version):  # not a version at all
        return _refused(400, "BadRequest", f"send the header 'Tus-Resumable: {TUS_VERSION}' (the tus protocol version)")
    return _refused(412, "TusVersion", f"this server speaks the tus protocol {TUS_VERSION}; send the header "
                    f"'Tus-Resumable: {TUS_VERSION}'", **{"Tus-Version": TUS_VERSION})


def _has_record(request: Request, sha: str) -> bool:
    if sha in _recorded(request):
        return True
    photo = metadata.tables["photo"]
    with request.app.state.store.read() as conn:
        found = conn.execute(sa.select(photo.c.id).where(photo.c.sha256 == sha).limit(1)).first() is not None
    if found:
        _remember(request, [sha])
    return found


_RECORDED_MAX = 100_000  # hashes remembered at most (some 10 MB); past that the memory starts again


def _recorded(request: Request) -> set[str]:
    """Hashes some photo record is known to name (records are versioned, never deleted, so a hash once named
    stays named): filled by ``/missing``, one query for every hash it lists, so that creating each upload needs
    no query of its own."""
    known: set[str] | None = getattr(request.app.state, "photo_recorded", None)
    if known is None:
        known = request.app.state.photo_recorded = set()
    return known


def _remember(request: Request, hashes: list[str]) -> None:
    known = _recorded(request)
    if len(known) + len(hashes) > _RECORDED_MAX:
        known.clear()
    known.update(hashes)


def _with_records(request: Request, hashes: list[str]) -> list[str]:
    """Those of ``hashes`` that some photo record names (one query)."""
    if not hashes:
        return []
    photo = metadata.tables["photo"]
    with request.app.state.store.read() as conn:
        return [r[0] for r in conn.execute(sa.select(photo.c.sha256).distinct().where(photo.c.sha256.in_(hashes)))]


@router.post("/missing", response_model=MissingAnswer)
def missing(request: Request, body: MissingAsk, _device: Uploader) -> MissingAnswer:
    """Which of these photo files the camp server lacks (the tablet uploads those, after its versions)."""
    vault = _vault(request)
    lacking = vault.missing(body.hashes)
    _remember(request, _with_records(request, lacking))
    return MissingAnswer(missing=lacking, begun=vault.begun(lacking), max_chunk_bytes=request.app.state.max_body_bytes)


@router.post("/uploads", status_code=201, responses={
    201: {"description": "the upload exists (with the first chunk written when one was sent and it stood at 0); "
          "its URL is in Location", "headers": {**_OFFSET, "Location": {
              "description": "the upload's URL", "schema": {"type": "string"}}}},
    404: {"description": "no photo record names this hash: push the versions first", **_ERR},
    412: {"description": "another tus version", **_ERR},
    415: {"description": "a first chunk that is not application/offset+octet-stream", **_ERR},
    422: {"description": "the complete file is not a whole image (discarded)", **_ERR},
    460: {"description": "the complete file does not hash to the photo's SHA-256 (discarded: start again)", **_ERR}},
    openapi_extra=_CHUNK_BODY_OPTIONAL)
async def create_upload(request: Request, _device: Uploader,
                        upload_length: Annotated[int, Header(alias="Upload-Length", ge=1, le=MAX_PHOTO_BYTES)],
                        upload_metadata: Annotated[str, Header(alias="Upload-Metadata", pattern=r"^sha256 [A-Za-z0-9+/]{86}==$",
                                                               description="sha256 <base64 of the photo's 64-digit hash>")],
                        ) -> Response:
    """Begin (or find again) the upload of one photo file: ``Upload-Length`` its size, ``Upload-Metadata``
    ``sha256 <base64 of the hash>``; the body may carry the first chunk (tus "Creation With Upload"), written
    only when the upload stands at byte 0 (``Upload-Offset`` in the answer says what was kept)."""
    if (refused := _version_refused(request)) is not None:
        return refused
    sha = _metadata_hash(upload_metadata)
    vault = _vault(request)
    try:
        state: UploadState | None = None
        if sha is not None and sha in _recorded(request):  # the usual case: no query, no worker thread
            state = vault.begin_now(sha, upload_length)
        if state is None or state.complete:
            # an upload whose every byte is in but which was not kept (a power cut lost the rename) is finished here
            state = await run_in_threadpool(_begin, request, vault, sha, upload_length)
    except (PhotoError, RecordNotFound) as exc:
        return _refusal(exc)
    if _sends_body(request) and state.offset == 0 and not state.complete:
        answer = await _receive(request, vault, sha, 0)
        if not isinstance(answer, UploadState):
            return answer
        state = answer
    answer = Response(status_code=201, headers={"Location": f"/v1/photos/uploads/{sha}"})
    return _tus(answer, state)


def _begin(request: Request, vault: PhotoVault, sha: str | None, length: int) -> UploadState:
    if sha is None or not _has_record(request, sha):
        raise RecordNotFound(f"no photo record names the file {sha}; push the tablet's versions before its photos")
    return vault.finish(sha, vault.begin(sha, length))


def _sends_body(request: Request) -> bool:
    length = request.headers.get("content-length")
    return (length is not None and length != "0") or "chunked" in request.headers.get("transfer-encoding", "")


async def _receive(request: Request, vault: PhotoVault, sha: str, offset: int) -> UploadState | JSONResponse:
    """Write the request's body at ``offset`` as it streams in (hashed on the way), then finish the upload when it
    is complete; the new state, or the refusal to answer."""
    content_type = request.headers.get("content-type", "")
    if content_type.split(";")[0].strip().lower() != "application/offset+octet-stream":
        return _refused(415, "UnsupportedMediaType", "send the chunk as 'Content-Type: application/offset+octet-stream'")
    try:
        with vault.receiving(sha, offset) as chunk:
            async for piece in request.stream():
                chunk.write(piece)
        done = vault.finish_now(sha, chunk.state())  # the usual case: the header and end check, the rename
        return done if done is not None else await run_in_threadpool(vault.finish, sha, chunk.state())
    except (PhotoError, RecordNotFound) as exc:
        return _refusal(exc)


def _refusal(exc: PhotoError | RecordNotFound) -> JSONResponse:
    """The tus answer to an upload refused: 409 wrong offset, 404 none begun, 460 wrong hash, 422 not an image."""
    if isinstance(exc, OffsetMismatch):
        return _refused(409, "OffsetMismatch", str(exc))
    if isinstance(exc, RecordNotFound):
        return _refused(404, "RecordNotFound", str(exc))
    if isinstance(exc, UploadMismatch):
        return _refused(460, "UploadMismatch", str(exc))
    return _refused(422, type(exc).__name__, str(exc))


def _metadata_hash(text: str) -> str | None:
    for pair in text.split(","):
        key, _, value = pair.strip().partition(" ")
        if key == "sha256":
            try:
                sha = base64.b64decode(value, validate=True).decode()
            except (ValueError, UnicodeDecodeError):
                return None
            return sha if len(sha) == 64 and all(c in "0123456789abcdef" for c in sha) else None
    return None


@router.head("/uploads/{sha256}", responses={
    200: {"description": "where the upload stands", "headers": _LENGTH},
    404: {"description": "no upload of this photo was begun"},
    400: {"description": "no Tus-Resumable header"},
    412: {"description": "another tus version"}}, openapi_extra=_TUS_PARAM)
def upload_state(request: Request, sha256: Sha, _device: Uploader) -> Response:
    """Where the upload of a photo stands (``Upload-Offset`` of ``Upload-Length``)."""
    if (refused := _version_refused(request)) is not None:
        return Response(status_code=refused.status_code, headers=dict(refused.headers))
    try:
        state = _vault(request).state(sha256)
    except RecordNotFound:
        return _tus(Response(status_code=404))
    return _tus(Response(status_code=200), state, length=True)


@router.patch("/uploads/{sha256}", status_code=204, responses={
    204: {"description": "the chunk is kept; Upload-Offset is where the upload now stands", "headers": _OFFSET},
    404: {"description": "no upload of this photo was begun", **_ERR},
    409: {"description": "the chunk does not start where the upload stands (nothing written)", **_ERR},
    412: {"description": "another tus version", **_ERR},
    415: {"description": "a body that is not application/offset+octet-stream", **_ERR},
    422: {"description": "the complete file is not a whole image (discarded)", **_ERR},
    460: {"description": "the complete file does not hash to the photo's SHA-256 (discarded: start again)", **_ERR}},
    openapi_extra=_CHUNK_BODY)
async def append_chunk(request: Request, sha256: Sha, _device: Uploader,
                       upload_offset: Annotated[int, Header(alias="Upload-Offset", ge=0, le=MAX_PHOTO_BYTES)]) -> Response:
    """Append one chunk of the photo's bytes at ``Upload-Offset``; the file is checked and kept after the last."""
    if (refused := _version_refused(request)) is not None:
        return refused
    state = await _receive(request, _vault(request), sha256, upload_offset)
    if not isinstance(state, UploadState):
        return state
    return _tus(Response(status_code=204), state)


@router.get("/files/{sha256}", response_class=FileResponse, responses={
    200: {"content": {"application/octet-stream": {}}, "description": "the photo file as it was taken"}})
def photo_file(request: Request, sha256: Sha, _device: Reader, thumb: bool = False) -> FileResponse:
    """A photo file the camp server holds (``thumb=true``: its PNG thumbnail); photos of possible human remains
    only for recorders and managers."""
    from ..photos import withheld_photo

    vault = _vault(request)
    with request.app.state.store.read() as conn:
        hidden = withheld_photo(conn, sha256, _device.role)
    if hidden or not vault.has(sha256) or not _has_record(request, sha256):
        raise RecordNotFound(f"this camp server holds no photo file {sha256}")
    if thumb:
        return FileResponse(vault.thumbnail(sha256), media_type="image/png")
    return FileResponse(vault.path(sha256), media_type="application/octet-stream")
