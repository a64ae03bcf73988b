"""Python client of the stillsky loop daemon's Control API.

    import stillsky

    with stillsky.Client("127.0.0.1:7411") as loop:
        loop.calibrate(progress=lambda phase, done, total: print(phase, done, total))
        loop.close_loop()
        tel = loop.telemetry(1000)          # numpy arrays: tel.slopes, tel.commands, ...
        rec = loop.record(5000)             # every frame, with its timestamps

The wire code in stillsky.v1 is generated from the same .proto files as the Go
daemon (see generate.sh). Errors from the daemon raise stillsky.Error, which
carries the gRPC status code and the daemon's message.
"""

from stillsky.client import (
    CALIBRATING,
    CLOSED,
    HOLD,
    OPEN,
    TRIPPED,
    Client,
    Error,
    Recording,
    Telemetry,
    state_name,
)

__all__ = [
    "CALIBRATING",
    "CLOSED",
    "HOLD",
    "OPEN",
    "TRIPPED",
    "Client",
    "Error",
    "Recording",
    "Telemetry",
    "state_name",
]
