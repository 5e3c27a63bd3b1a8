"""OPC UA publishing of the station's verdicts for the line controller (IEC 62541, through ``asyncua``).

The server runs in a thread of its own with its own asyncio loop; the
station calls :meth:`VerdictServer.publish` from its threads, which writes
the values into the address space directly (no sampling in between) and
returns when they are written, so a client's data-change subscription sees
them within its publishing interval.

Address space (namespace ``NAMESPACE_URI``; every node id is a string node id
in that namespace, ``ns=<index>;s=<path>``; all values are read-only)::

    Objects/LayStation                       object
        BatchId          String             the open batch
        Recipe           String             recipe name and revision
        Heartbeat        UInt64             +1 every HEARTBEAT_S while the station runs
        State            String             watching | closing (the batch report is being written)
        PartsJudged      UInt32             +1 per part judged: the trigger for a controller
        LastPart/        object
            Name         String             part key (the image's file name)
            ImageSha256  String
            Verdict      String             accept | reject | review | error (not inspected)
            VerdictCode  Int32              0 accept, 1 reject, 3 review, 2 not inspected (the exit codes)
            LatencyMs    Double             file complete -> verdict published
            Regions/<region>/               object per recipe region
                Lay        Double           lay, degrees (NaN when no texture or not inspected)
                Deviation  Double           degrees (NaN likewise)
                Verdict    String           pass | fail | no-texture ("" when not inspected)
        Counts/          object
            Accept, Reject, Review, NotInspected   UInt32

For one part, every value is written before ``Verdict``, ``VerdictCode``
and lastly ``PartsJudged``: a controller that reacts to ``PartsJudged``
reads the matching rest.
"""

from __future__ import annotations

import asyncio
import logging
import math
import threading
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Mapping, Sequence
from urllib.parse import urlsplit

from ..errors import InputError

__all__ = ["NAMESPACE_URI", "HEARTBEAT_S", "PublishedRegion", "PublishedPart", "VerdictServer", "parse_endpoint"]

NAMESPACE_URI = "urn:surfinspect:lay-station:1"
HEARTBEAT_S = 1.0
ROOT = "LayStation"
_START_TIMEOUT_S = 30.0
_WRITE_TIMEOUT_S = 5.0
_COUNT_NODES = {"accept": "Accept", "reject": "Reject", "review": "Review", "error": "NotInspected"}


@dataclass(frozen=True)
class PublishedRegion:
    name: str
    lay_deg: float | None
    deviation_deg: float | None
    verdict: str


@dataclass(frozen=True)
class PublishedPart:
    name: str
    image_sha256: str
    verdict: str
    verdict_code: int
    latency_ms: float
    regions: Sequence[PublishedRegion]
    counts: Mapping[str, int]
    parts_judged: int


def parse_endpoint(text: str) -> tuple[str, int]:
    """(host, port) of ``opc.tcp://HOST:PORT`` (``tcp://`` accepted); InputError naming the flag otherwise."""
    parts = urlsplit(text)
    try:
        port = parts.port
    except ValueError:
        port = None
    if parts.scheme not in ("opc.tcp", "tcp") or not parts.hostname or port is None:
        raise InputError(
            f"--opcua: {text!r} is not an OPC UA endpoint (allowed: opc.tcp://HOST:PORT or tcp://HOST:PORT)"
        )
    return parts.hostname, port


class VerdictServer:
    """An OPC UA server holding the last verdict, counts and a heartbeat (see the module notes)."""

    def __init__(self, endpoint: str, *, batch_id: str, recipe: str, region_names: Sequence[str]):
        self.host, self.port = parse_endpoint(endpoint)
        self.url = f"opc.tcp://{self.host}:{self.port}/surfinspect/"
        self.batch_id, self.recipe, self.region_names = batch_id, recipe, list(region_names)
        self._loop = asyncio.new_event_loop()
        self._thread = threading.Thread(target=self._loop.run_forever, name="opcua-server", daemon=True)
        self._server = None
        self._nodes: dict[str, object] = {}
        self._heartbeat_task = None

    # -- life cycle (called from the station's threads)

    def start(self, counts: Mapping[str, int], parts_judged: int) -> None:
        """Bind and start serving; InputError when the endpoint cannot be served."""
        logging.getLogger("asyncua").setLevel(logging.ERROR)  # its start-up notes are not the station's output
        self._thread.start()
        try:
            self._call(self._start(counts, parts_judged), _START_TIMEOUT_S)
        except (OSError, asyncio.TimeoutError, TimeoutError) as exc:
            self._halt_loop()
            raise InputError(f"--opcua {self.url}: cannot serve OPC UA there ({exc})") from None

    def publish(self, part: PublishedPart) -> None:
        self._call(self._write_part(part), _WRITE_TIMEOUT_S)

    def set_state(self, state: str) -> None:
        """``watching`` or ``closing``: a controller stops sending parts to a closing station."""
        from asyncua import ua

        self._call(self._set(f"{ROOT}.State", state, ua.VariantType.String), _WRITE_TIMEOUT_S)

    def stop(self) -> None:
        if not self._thread.is_alive():
            return
        try:
            self._call(self._stop(), _WRITE_TIMEOUT_S)
        finally:
            self._halt_loop()

    def _call(self, coro, timeout: float):
        return asyncio.run_coroutine_threadsafe(coro, self._loop).result(timeout)

    def _halt_loop(self) -> None:
        self._loop.call_soon_threadsafe(self._loop.stop)
        self._thread.join(timeout=_WRITE_TIMEOUT_S)

    # -- in the server's loop

    async def _start(self, counts: Mapping[str, int], parts_judged: int) -> None:
        from asyncua import Server, ua

        server = Server()
        await server.init()
        server.set_endpoint(self.url)
        server.set_server_name("surfinspect lay station")
        server.set_security_policy([ua.SecurityPolicyType.NoSecurity])
        ns = await server.register_namespace(NAMESPACE_URI)
        await self._build(server, ns, counts, parts_judged)
        await server.start()
        self._server = server
        self._heartbeat_task = asyncio.get_running_loop().create_task(self._beat())

    async def _build(self, server, ns: int, counts: Mapping[str, int], parts_judged: int) -> None:
        from asyncua import ua

        async def obj(parent, path: str, name: str):
            return await parent.add_object(ua.NodeId(path, ns), ua.QualifiedName(name, ns))

        async def var(parent, path: str, name: str, value, vtype) -> None:
            self._nodes[path] = await parent.add_variable(
                ua.NodeId(path, ns), ua.QualifiedName(name, ns), ua.Variant(value, vtype)
            )

        root = await obj(server.nodes.objects, ROOT, ROOT)
        S, D, U32 = ua.VariantType.String, ua.VariantType.Double, ua.VariantType.UInt32
        await var(root, f"{ROOT}.BatchId", "BatchId", self.batch_id, S)
        await var(root, f"{ROOT}.Recipe", "Recipe", self.recipe, S)
        await var(root, f"{ROOT}.Heartbeat", "Heartbeat", 0, ua.VariantType.UInt64)
        await var(root, f"{ROOT}.State", "State", "watching", S)
        await var(root, f"{ROOT}.PartsJudged", "PartsJudged", parts_judged, U32)
        last = await obj(root, f"{ROOT}.LastPart", "LastPart")
        for name, value, vtype in (
            ("Name", "", S),
            ("ImageSha256", "", S),
            ("Verdict", "", S),
            ("VerdictCode", -1, ua.VariantType.Int32),
            ("LatencyMs", math.nan, D),
        ):
            await var(last, f"{ROOT}.LastPart.{name}", name, value, vtype)
        regions = await obj(last, f"{ROOT}.LastPart.Regions", "Regions")
        for region in self.region_names:
            base = f"{ROOT}.LastPart.Regions.{region}"
            folder = await obj(regions, base, region)
            await var(folder, f"{base}.Lay", "Lay", math.nan, D)
            await var(folder, f"{base}.Deviation", "Deviation", math.nan, D)
            await var(folder, f"{base}.Verdict", "Verdict", "", S)
        counts_obj = await obj(root, f"{ROOT}.Counts", "Counts")
        for key, name in _COUNT_NODES.items():
            await var(counts_obj, f"{ROOT}.Counts.{name}", name, int(counts.get(key, 0)), U32)

    async def _set(self, path: str, value, vtype) -> None:
        from asyncua import ua

        now = datetime.now(timezone.utc)
        await self._server.write_attribute_value(
            self._nodes[path].nodeid, ua.DataValue(ua.Variant(value, vtype), SourceTimestamp=now, ServerTimestamp=now)
        )

    async def _write_part(self, part: PublishedPart) -> None:
        from asyncua import ua

        S, D = ua.VariantType.String, ua.VariantType.Double
        for region in part.regions:
            if region.name not in self.region_names:
                continue
            base = f"{ROOT}.LastPart.Regions.{region.name}"
            await self._set(f"{base}.Lay", _nan_if_none(region.lay_deg), D)
            await self._set(f"{base}.Deviation", _nan_if_none(region.deviation_deg), D)
            await self._set(f"{base}.Verdict", region.verdict, S)
        await self._set(f"{ROOT}.LastPart.Name", part.name, S)
        await self._set(f"{ROOT}.LastPart.ImageSha256", part.image_sha256, S)
        await self._set(f"{ROOT}.LastPart.LatencyMs", float(part.latency_ms), D)
        for key, name in _COUNT_NODES.items():
            await self._set(f"{ROOT}.Counts.{name}", int(part.counts.get(key, 0)), ua.VariantType.UInt32)
        await self._set(f"{ROOT}.LastPart.Verdict", part.verdict, S)
        await self._set(f"{ROOT}.LastPart.VerdictCode", int(part.verdict_code), ua.VariantType.Int32)
        await self._set(f"{ROOT}.PartsJudged", int(part.parts_judged), ua.VariantType.UInt32)

    async def _beat(self) -> None:
        from asyncua import ua

        beat = 0
        while True:
            await asyncio.sleep(HEARTBEAT_S)
            beat += 1
            await self._set(f"{ROOT}.Heartbeat", beat, ua.VariantType.UInt64)

    async def _stop(self) -> None:
        if self._heartbeat_task is not None:
            self._heartbeat_task.cancel()
        if self._server is not None:
            await self._server.stop()


def _nan_if_none(value: float | None) -> float:
    return math.nan if value is None else float(value)
