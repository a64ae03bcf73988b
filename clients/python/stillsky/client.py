"""The Control API client: one method per RPC, numpy arrays for telemetry."""

import os
import tempfile
import time
from dataclasses import dataclass
from typing import Callable, Iterable, Iterator, Optional, Union

import grpc
import numpy as np

from stillsky.v1 import control_pb2 as pb
from stillsky.v1 import control_pb2_grpc as pb_grpc

# Loop states, as GetStatus and telemetry report them.
OPEN = pb.LOOP_STATE_OPEN
CLOSED = pb.LOOP_STATE_CLOSED
HOLD = pb.LOOP_STATE_HOLD
CALIBRATING = pb.LOOP_STATE_CALIBRATING
TRIPPED = pb.LOOP_STATE_TRIPPED

# Reconstructor files travel in chunks of this size (the Go client uses the same).
_CHUNK = 1 << 20


def state_name(state: int) -> str:
    """Returns "open", "closed", "hold", "calibrating", "tripped" or "unspecified"."""
    return pb.LoopState.Name(state).removeprefix("LOOP_STATE_").lower()


class Error(Exception):
    """An error returned by the daemon (or by gRPC on the way to it).

    code is the grpc.StatusCode (e.g. grpc.StatusCode.FAILED_PRECONDITION) and
    message the daemon's own text; str(error) gives both on one line, as
    `stillsky ctl` prints them.
    """

    def __init__(self, code: grpc.StatusCode, message: str):
        super().__init__(f"{code.name.lower()}: {message}")
        self.code = code
        self.message = message


def _raise(err: grpc.RpcError):
    raise Error(err.code(), err.details() or "") from None


@dataclass
class Telemetry:
    """Telemetry samples as numpy arrays, one row per sample in frame order.

    The daemon stamps no clock time on a sample: frame_number / frame rate is the
    bench's time, and received_unix_s is when this client received each sample.
    """

    frame_number: np.ndarray  # uint64 (n,)
    state: np.ndarray  # int32 (n,), compare with OPEN, CLOSED, ...
    slopes: np.ndarray  # float32 (n, slopes), radians of tilt
    commands: np.ndarray  # float32 (n, actuators), metres of surface
    residual_slope_rms_rad: np.ndarray  # float64 (n,)
    residual_wavefront_rms_m: np.ndarray  # float64 (n,)
    strehl_estimate: np.ndarray  # float64 (n,)
    saturated_actuators: np.ndarray  # uint32 (n,)
    rtc_latency_s: np.ndarray  # float64 (n,)
    received_unix_s: np.ndarray  # float64 (n,)

    def __len__(self) -> int:
        return len(self.frame_number)


@dataclass
class Recording:
    """A recording of every frame the loop handled, from RecordTelemetry.

    header is the recording's RecordingHeader message (devices, gain, leak, modal
    gains, reconstructor, start time), reconstructor_file the reconstructor's FITS
    file as save_reconstructor returns it (b"" when none); the arrays have one row
    per recorded frame. Timestamps are CLOCK_MONOTONIC nanoseconds: readout_end_ns
    on the camera's host, the others on the daemon's. Frames the loop refused or
    skipped are missing (frame_number shows the gaps).
    """

    header: pb.RecordingHeader
    reconstructor_file: bytes
    frame_number: np.ndarray  # uint64 (n,)
    readout_end_ns: np.ndarray  # int64 (n,)
    received_ns: np.ndarray  # int64 (n,)
    computed_ns: np.ndarray  # int64 (n,)
    sent_ns: np.ndarray  # int64 (n,)
    state: np.ndarray  # int32 (n,)
    saturated_actuators: np.ndarray  # uint32 (n,)
    residual_wavefront_rms_m: np.ndarray  # float64 (n,)
    strehl_estimate: np.ndarray  # float64 (n,)
    slopes: np.ndarray  # float32 (n, slopes), radians, as received
    commands: np.ndarray  # float32 (n, actuators), metres of surface, as sent

    def __len__(self) -> int:
        return len(self.frame_number)


class Client:
    """A connection to a loop daemon's Control API.

    address is host:port or unix:/path/to/socket. The security options match
    `stillsky ctl`: tls_ca (the CA of the daemon's certificate, PEM file) turns
    TLS on; cert and key give a client certificate for mutual TLS; token_file
    holds a bearer token sent with every call (TLS only); server_name overrides
    the name checked in the daemon's certificate. timeout bounds each call in
    seconds (calibration and telemetry take their own).

    Use it as a context manager, or call close() when done.
    """

    def __init__(
        self,
        address: str = "127.0.0.1:7411",
        *,
        tls_ca: Optional[str] = None,
        cert: Optional[str] = None,
        key: Optional[str] = None,
        token_file: Optional[str] = None,
        server_name: Optional[str] = None,
        timeout: float = 30.0,
    ):
        self.timeout = timeout
        if tls_ca is None:
            if cert or key or token_file:
                raise ValueError("client certificate or token needs TLS: give the server's CA with tls_ca")
            self._channel = grpc.insecure_channel(address)
        else:
            with open(tls_ca, "rb") as f:
                ca = f.read()
            chain = private = None
            if cert or key:
                if not (cert and key):
                    raise ValueError("mutual TLS needs both cert and key")
                with open(cert, "rb") as f:
                    chain = f.read()
                with open(key, "rb") as f:
                    private = f.read()
            creds = grpc.ssl_channel_credentials(root_certificates=ca, private_key=private, certificate_chain=chain)
            if token_file:
                with open(token_file, encoding="utf-8") as f:
                    token = f.read().strip()
                # Sends "authorization: Bearer <token>", over TLS only.
                creds = grpc.composite_channel_credentials(creds, grpc.access_token_call_credentials(token))
            options = [("grpc.ssl_target_name_override", server_name)] if server_name else []
            self._channel = grpc.secure_channel(address, creds, options=options)
        self._stub = pb_grpc.ControlServiceStub(self._channel)

    def close(self):
        """Closes the connection."""
        self._channel.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _unary(self, method, request):
        try:
            return method(request, timeout=self.timeout)
        except grpc.RpcError as err:
            _raise(err)

    def status(self) -> pb.GetStatusResponse:
        """The loop's state, parameters, counters, geometry and residual estimates."""
        return self._unary(self._stub.GetStatus, pb.GetStatusRequest())

    def open_loop(self) -> pb.GetStatusResponse:
        """Stops correcting (the mirror goes flat); returns the status after."""
        return self._unary(self._stub.OpenLoop, pb.OpenLoopRequest()).status

    def close_loop(self) -> pb.GetStatusResponse:
        """Starts correcting from a flat mirror; returns the status after.

        Raises Error(FAILED_PRECONDITION) without a reconstructor, while
        calibrating, or with the devices disconnected."""
        return self._unary(self._stub.CloseLoop, pb.CloseLoopRequest()).status

    def hold_loop(self) -> pb.GetStatusResponse:
        """Freezes the mirror at its last command (from a closed loop)."""
        return self._unary(self._stub.HoldLoop, pb.HoldLoopRequest()).status

    def resume_autonomous(self) -> pb.GetStatusResponse:
        """Hands the loop back to the unattended-operation supervisor
        (stillsky loop --autonomous) after an open, close or hold put it in
        manual; returns the status after (status.supervisor_state).

        Raises Error(FAILED_PRECONDITION) without the supervisor or when it is
        not in manual."""
        return self._unary(self._stub.ResumeAutonomous, pb.ResumeAutonomousRequest()).status

    def set_gain(self, gain: float) -> pb.GetStatusResponse:
        """Sets the integrator gain, in [0, 2), from the next frame."""
        return self._unary(self._stub.SetGain, pb.SetGainRequest(gain=gain)).status

    def set_leak(self, leak: float) -> pb.GetStatusResponse:
        """Sets the integrator leak, in [0, 1), from the next frame."""
        return self._unary(self._stub.SetLeak, pb.SetLeakRequest(leak=leak)).status

    def set_modal_gains(self, gains: Iterable[float]) -> pb.GetStatusResponse:
        """Sets one gain multiplier, in [0, 2), per kept mode of the reconstructor."""
        values = [float(g) for g in np.asarray(gains, dtype=np.float64).ravel()]
        return self._unary(self._stub.SetModalGains, pb.SetModalGainsRequest(gains=values)).status

    def calibrate(
        self,
        *,
        amplitude_m: float = 0,
        frames_per_pattern: int = 0,
        hadamard: bool = False,
        modes_kept: int = 0,
        max_condition: float = 0,
        tikhonov: float = 0,
        single_pokes: bool = False,
        basis: str = "",
        progress: Optional[Callable[[str, int, int], None]] = None,
        timeout: Optional[float] = None,
    ) -> pb.ReconstructorInfo:
        """Measures the interaction matrix, builds and installs the reconstructor.

        Zero values take the daemon's defaults. progress(phase, done, total) is
        called for every progress message ("pokes", "inverting", "done"). Returns
        the new reconstructor's description. The loop must be open. hadamard or
        single_pokes (not both) choose the poke patterns at any size; neither
        takes the daemon's default (Hadamard from 1000 actuators up). basis is
        "svd" (or empty: the interaction matrix's singular modes), "kl"
        (Karhunen–Loève modes; modes_kept then keeps that many of them) or
        "mirror" (the mirror's own modes, ordered by the sensor's
        sensitivity)."""
        req = pb.CalibrateRequest(
            amplitude_m=amplitude_m,
            frames_per_pattern=frames_per_pattern,
            hadamard=hadamard,
            modes_kept=modes_kept,
            max_condition=max_condition,
            tikhonov=tikhonov,
            single_pokes=single_pokes,
            basis=basis,
        )
        info = None
        try:
            for r in self._stub.Calibrate(req, timeout=timeout):
                if progress is not None:
                    progress(r.phase, r.done, r.total)
                if r.HasField("reconstructor"):
                    info = r.reconstructor
        except grpc.RpcError as err:
            _raise(err)
        if info is None:
            raise Error(grpc.StatusCode.UNKNOWN, "calibration ended without a reconstructor")
        return info

    def save_reconstructor(self, path: Optional[str] = None) -> bytes:
        """Returns the current reconstructor as FITS bytes, and writes them to path
        if given (atomically: a failed transfer leaves an existing file alone)."""
        try:
            data = b"".join(r.chunk for r in self._stub.SaveReconstructor(pb.SaveReconstructorRequest(), timeout=self.timeout))
        except grpc.RpcError as err:
            _raise(err)
        if path is not None:
            d = os.path.dirname(os.path.abspath(path))
            fd, tmp = tempfile.mkstemp(dir=d, prefix=".reconstructor-")
            try:
                with os.fdopen(fd, "wb") as f:
                    f.write(data)
                    f.flush()
                    os.fsync(f.fileno())
                os.replace(tmp, path)
            except BaseException:
                os.unlink(tmp)
                raise
        return data

    def load_reconstructor(self, source: Union[str, os.PathLike, bytes]) -> pb.ReconstructorInfo:
        """Installs a FITS reconstructor given as a file path or as bytes."""
        if isinstance(source, (bytes, bytearray, memoryview)):
            data = bytes(source)
        else:
            with open(source, "rb") as f:
                data = f.read()
        chunks = (pb.LoadReconstructorRequest(chunk=data[i : i + _CHUNK]) for i in range(0, len(data), _CHUNK))
        return self._unary(self._stub.LoadReconstructor, chunks).reconstructor

    def capture_pixel_calibration(self, kind: str, frames: int = 0,
                                  timeout: Optional[float] = None) -> pb.CapturePixelCalibrationResponse:
        """Captures a pixel camera's "dark" (its shutter closed), "flat" (its flat
        lamp, less the dark) or "reference" (slopes on its calibration source),
        averaging frames (0: the daemon's 50; at most 10000), with the loop open.
        The daemon swaps it into the centroid between two frames and commits it
        to its state directory (response.file). The response has the mean and
        rms of what was measured.

        Raises ValueError for another kind; Error(FAILED_PRECONDITION) for a
        slope camera or a loop that is not open."""
        kinds = {"dark": pb.PIXEL_CALIBRATION_KIND_DARK, "flat": pb.PIXEL_CALIBRATION_KIND_FLAT,
                 "reference": pb.PIXEL_CALIBRATION_KIND_REFERENCE}
        if kind not in kinds:
            raise ValueError(f"kind {kind!r}: want one of {sorted(kinds)}")
        try:
            return self._stub.CapturePixelCalibration(
                pb.CapturePixelCalibrationRequest(kind=kinds[kind], frames=frames), timeout=timeout)
        except grpc.RpcError as err:
            _raise(err)

    def optimise_modal_gains(self, frames: int = 0, dry_run: bool = False,
                             timeout: Optional[float] = None) -> pb.OptimiseModalGainsResponse:
        """Records frames (0: the daemon's 4096), chooses each mode's gain from its
        temporal spectrum and, unless dry_run, applies them. The response has the
        gains (relative to the loop gain), the predicted residual before and after,
        and the status."""
        try:
            return self._stub.OptimiseModalGains(pb.OptimiseModalGainsRequest(frames=frames, dry_run=dry_run),
                                                 timeout=timeout)
        except grpc.RpcError as err:
            _raise(err)

    def record(self, frame_count: int, timeout: Optional[float] = None) -> Recording:
        """Records every frame the loop handles, from the next one on, for
        frame_count frames, as numpy arrays (see Recording). A client that falls
        more than the daemon's ring behind gets Error(DATA_LOSS)."""
        header = None
        batches = []
        chunks = []
        try:
            for r in self._stub.RecordTelemetry(pb.RecordTelemetryRequest(frame_count=frame_count), timeout=timeout):
                if r.HasField("header"):
                    header = r.header
                elif r.HasField("reconstructor_chunk"):
                    chunks.append(r.reconstructor_chunk)
                elif r.HasField("frames"):
                    batches.append(r.frames)
        except grpc.RpcError as err:
            _raise(err)
        if header is None:
            raise Error(grpc.StatusCode.UNKNOWN, "recording ended without a header")

        def column(name, dtype):
            return np.concatenate([np.asarray(getattr(b, name), dtype=dtype) for b in batches]) if batches \
                else np.empty(0, dtype=dtype)

        frames = column("frame_numbers", np.uint64)
        n = len(frames)

        def matrix(name, width):
            flat = column(name, np.float32)
            if n and len(flat) != n * width:
                raise Error(grpc.StatusCode.DATA_LOSS, f"recording: {len(flat)} {name} for {n} frames of {width}")
            return flat.reshape(n, width)

        file = b"".join(chunks)
        if len(file) != header.reconstructor_file_bytes:
            raise Error(grpc.StatusCode.DATA_LOSS,
                        f"recording: {len(file)} of the {header.reconstructor_file_bytes} bytes of the reconstructor file")
        return Recording(
            header=header,
            reconstructor_file=file,
            frame_number=frames,
            readout_end_ns=column("readout_end_ns", np.int64),
            received_ns=column("received_ns", np.int64),
            computed_ns=column("computed_ns", np.int64),
            sent_ns=column("sent_ns", np.int64),
            state=column("states", np.int32),
            saturated_actuators=column("saturated_actuators", np.uint32),
            residual_wavefront_rms_m=column("residual_wavefront_rms_m", np.float64),
            strehl_estimate=column("strehl_estimate", np.float64),
            slopes=matrix("slopes", header.camera.slope_count),
            commands=matrix("commands", header.mirror.actuator_count),
        )

    def samples(self, decimation: int = 1) -> Iterator[pb.StreamTelemetryResponse]:
        """Yields telemetry messages as they come, the newest frame of each block of
        decimation frame numbers, until the caller stops iterating (which ends the
        stream). A client slower than the loop gets fewer samples, never stale ones."""
        call = self._stub.StreamTelemetry(pb.StreamTelemetryRequest(decimation=decimation))
        try:
            for s in call:
                yield s
        except grpc.RpcError as err:
            _raise(err)
        finally:
            call.cancel()

    def telemetry(self, count: int, decimation: int = 1, timeout: Optional[float] = None) -> Telemetry:
        """Collects count samples as numpy arrays, one per block of decimation
        frame numbers (check frame_number for gaps when the loop outruns the client).

        Raises Error(DEADLINE_EXCEEDED) when timeout seconds pass first."""
        if count < 1:
            raise ValueError(f"telemetry: count {count}: must be >= 1")
        rows = []
        received = []
        call = self._stub.StreamTelemetry(pb.StreamTelemetryRequest(decimation=decimation), timeout=timeout)
        try:
            for s in call:
                rows.append(s)
                received.append(time.time())
                if len(rows) == count:
                    break
        except grpc.RpcError as err:
            _raise(err)
        finally:
            call.cancel()
        if len(rows) < count:
            raise Error(grpc.StatusCode.UNAVAILABLE, f"telemetry stream ended after {len(rows)} of {count} samples")

        def column(name, dtype):
            return np.fromiter((getattr(r, name) for r in rows), dtype=dtype, count=len(rows))

        def matrix(name):
            width = {len(getattr(r, name)) for r in rows}
            if len(width) != 1:
                raise Error(grpc.StatusCode.DATA_LOSS, f"telemetry: {name} lengths {sorted(width)} differ between samples")
            out = np.empty((len(rows), width.pop()), dtype=np.float32)
            for i, r in enumerate(rows):
                out[i] = getattr(r, name)
            return out

        return Telemetry(
            frame_number=column("frame_number", np.uint64),
            state=column("state", np.int32),
            slopes=matrix("slopes"),
            commands=matrix("commands"),
            residual_slope_rms_rad=column("residual_slope_rms_rad", np.float64),
            residual_wavefront_rms_m=column("residual_wavefront_rms_m", np.float64),
            strehl_estimate=column("strehl_estimate", np.float64),
            saturated_actuators=column("saturated_actuators", np.uint32),
            rtc_latency_s=column("rtc_latency_s", np.float64),
            received_unix_s=np.asarray(received, dtype=np.float64),
        )
