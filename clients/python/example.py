"""Calibrate a loop daemon, close the loop, and summarise a second of telemetry.

    PYTHONPATH=clients/python /usr/bin/python3 clients/python/example.py 127.0.0.1:7411
"""

import sys

import numpy as np

import stillsky


def main(address):
    with stillsky.Client(address) as loop:
        info = loop.calibrate(progress=lambda phase, done, total: print(f"\r{phase} {done}/{total}", end="", flush=True))
        print(f"\nreconstructor: {info.method}, {info.modes_kept} modes, condition {info.condition_number:.3g}")
        loop.set_gain(0.3)
        loop.close_loop()
        rate = loop.status().frame_rate_hz
        tel = loop.telemetry(max(1, int(rate)))  # about a second of frames
        closed = tel.state == stillsky.CLOSED
        print(f"{len(tel)} frames: slopes {tel.slopes.shape}, commands {tel.commands.shape}")
        print(f"estimated Strehl ratio {tel.strehl_estimate[closed].mean():.3f}, "
              f"rms command {np.sqrt(np.mean(tel.commands[closed] ** 2)) * 1e9:.1f} nm")
        try:
            loop.set_gain(2.5)
        except stillsky.Error as e:
            print("refused:", e)
        loop.open_loop()


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "127.0.0.1:7411")
