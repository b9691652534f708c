"""A soft IOC for the EPICS adapter tests, built with caproto's server tools: one motor record
and one scaler record, reduced to the fields the adapter uses (an invented bench rotator and
photon counter).

Run: ``python epics_soft_ioc.py PREFIX``. The port comes from ``EPICS_CAS_SERVER_PORT``; it
prints ``READY`` once it serves. The motor turns at 200 deg/s between soft limits of -170 and
170 deg, a put to ``VAL`` or ``HOMF`` completes when the move ends (as a motor record's put
callback does), ``STOP`` halts it. The scaler counts for ``TP`` seconds of real time; S1 is a
10 MHz clock, S2 and S3 Poisson counts at 2000/s and 5000/s (seeded).
"""

from __future__ import annotations

import asyncio
import sys

import numpy as np
from caproto.server import PVGroup, pvproperty, run

SPEED_DEG_S = 200.0
TICK_S = 0.005
RATES = {"S2": 2000.0, "S3": 5000.0}


class Rotator(PVGroup):
    """Motor record ``rot1``."""

    val = pvproperty(value=0.0, name="rot1.VAL")
    rbv = pvproperty(value=0.0, name="rot1.RBV", read_only=True)
    dmov = pvproperty(value=1, name="rot1.DMOV", read_only=True)
    movn = pvproperty(value=0, name="rot1.MOVN", read_only=True)
    stop = pvproperty(value=0, name="rot1.STOP")
    homf = pvproperty(value=0, name="rot1.HOMF")
    lvio = pvproperty(value=0, name="rot1.LVIO", read_only=True)
    llm = pvproperty(value=-170.0, name="rot1.LLM")
    hlm = pvproperty(value=170.0, name="rot1.HLM")
    desc = pvproperty(value="bench rotator", name="rot1.DESC", dtype=str)
    egu = pvproperty(value="deg", name="rot1.EGU", dtype=str)

    halt = False

    async def _turn(self, target: float) -> None:
        self.halt = False
        await self.dmov.write(0)
        await self.movn.write(1)
        at = self.rbv.value
        while at != target and not self.halt:
            step = SPEED_DEG_S * TICK_S
            at = target if abs(target - at) <= step else at + step * np.sign(target - at)
            await self.rbv.write(at)
            await asyncio.sleep(TICK_S)
        await self.movn.write(0)
        await self.dmov.write(1)

    @val.putter
    async def val(self, instance, value):
        if not self.llm.value <= value <= self.hlm.value:
            await self.lvio.write(1)  # the record keeps still and flags the violation
            return instance.value
        await self.lvio.write(0)
        await self._turn(value)
        return value

    @homf.putter
    async def homf(self, instance, value):
        if value:
            await self._turn(0.0)
        return 0

    @stop.putter
    async def stop(self, instance, value):
        if value:
            self.halt = True
        return 0


class Scaler(PVGroup):
    """Scaler record ``sc1``."""

    tp = pvproperty(value=1.0, name="sc1.TP")
    cnt = pvproperty(value=0, name="sc1.CNT")
    s1 = pvproperty(value=0, name="sc1.S1", read_only=True)
    s2 = pvproperty(value=0, name="sc1.S2", read_only=True)
    s3 = pvproperty(value=0, name="sc1.S3", read_only=True)
    rng = np.random.default_rng(12)

    @cnt.putter
    async def cnt(self, instance, value):
        if not value:
            return 0
        gate = self.tp.value
        await asyncio.sleep(gate)
        await self.s1.write(round(1e7 * gate))
        await self.s2.write(int(self.rng.poisson(RATES["S2"] * gate)))
        await self.s3.write(int(self.rng.poisson(RATES["S3"] * gate)))
        return 0


class Bench(Rotator, Scaler):
    """Both records in one IOC."""


async def _ready(async_lib) -> None:
    print("READY", flush=True)


if __name__ == "__main__":
    ioc = Bench(prefix=sys.argv[1])
    run(ioc.pvdb, interfaces=["127.0.0.1"], startup_hook=_ready)
