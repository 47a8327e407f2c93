#!/usr/bin/env python3
"""A worked example of an isopach `helper` spectrometer (machine file: kind = "helper").

isopach starts this program once and speaks to it line by line over stdin/stdout (see
docs/bench.md, "The helper protocol"):

    hello 1                   -> ok pixels=N calibration=C0,C1[,C2[,C3]]
    dark MS AVERAGES          -> ok counts=V1,...,VN
    acquire MS AVERAGES KIND  -> ok counts=V1,...,VN     (KIND: sample or reference)
    close                     -> ok bye
    (any failure)             -> error TEXT

To wrap your own spectrometer, write a class with the methods of `SimulatedDriver`
(calibration, read, set_shutter, close) around your vendor's library and return it from
`make_driver`. Print nothing else on stdout: logs go to stderr (isopach keeps excerpts).

`--simulate` uses a simulated detector (a lamp curve, a 600 nm oxide fringe pattern for
samples, flat dark counts) so the protocol can be tried without hardware; isopach's tests
drive it. `--die-after K` exits after K acquisitions (to try isopach's restart).
"""

import argparse
import math
import sys


class SimulatedDriver:
    """A detector without hardware: deterministic counts, no noise."""

    def __init__(self, pixels):
        self.pixels = pixels
        self.shutter_open = True

    def calibration(self):
        """Wavelength of pixel i = C0 + C1*i + C2*i^2 (nm)."""
        return [420.0, 560.0 / (self.pixels - 1), 0.0]

    def set_shutter(self, open_):
        self.shutter_open = open_

    def read(self, integration_ms, averages, kind):
        c = self.calibration()
        counts = []
        for i in range(self.pixels):
            w = c[0] + c[1] * i + c[2] * i * i
            lamp = 20.0 * integration_ms * math.exp(-(((w - 650.0) / 300.0) ** 2))
            if not self.shutter_open:
                r = 0.0
            elif kind == "reference":
                r = 0.35
            else:
                r = 0.2 + 0.12 * math.cos(4 * math.pi * 1.46 * 600.0 / w)
            counts.append(100.0 + lamp * r)
        return counts

    def close(self):
        pass


def make_driver(args):
    if args.simulate:
        return SimulatedDriver(args.pixels)
    raise RuntimeError("no driver: wrap your spectrometer in make_driver() or use --simulate")


def reply(text):
    sys.stdout.write(text + "\n")
    sys.stdout.flush()


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--simulate", action="store_true")
    p.add_argument("--pixels", type=int, default=512)
    p.add_argument("--die-after", type=int, default=0)
    args = p.parse_args()
    driver = None
    acquisitions = 0
    for line in sys.stdin:
        words = line.split()
        if not words:
            continue
        try:
            if words[0] == "hello":
                if words[1:] != ["1"]:
                    reply("error this helper speaks protocol 1")
                    continue
                driver = make_driver(args)
                cal = ",".join(repr(c) for c in driver.calibration())
                reply(f"ok pixels={driver.pixels} calibration={cal}")
            elif words[0] in ("dark", "acquire") and driver is not None:
                ms, averages = float(words[1]), int(words[2])
                kind = words[3] if words[0] == "acquire" else "dark"
                driver.set_shutter(words[0] != "dark")
                frames = [driver.read(ms, averages, kind) for _ in range(averages)]
                mean = [sum(v) / averages for v in zip(*frames)]
                reply("ok counts=" + ",".join(f"{v:.2f}" for v in mean))
                acquisitions += 1
                if args.die_after and acquisitions >= args.die_after:
                    print("simulated crash", file=sys.stderr)
                    sys.exit(3)
            elif words[0] == "close":
                if driver is not None:
                    driver.close()
                reply("ok bye")
                return
            else:
                reply(f"error unknown or early request: {words[0]} (say hello first)")
        except Exception as e:  # every failure becomes an `error` reply
            reply(f"error {type(e).__name__}: {e}")


if __name__ == "__main__":
    main()
