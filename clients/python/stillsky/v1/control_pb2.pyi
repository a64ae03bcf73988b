from stillsky.v1 import camera_pb2 as _camera_pb2
from stillsky.v1 import mirror_pb2 as _mirror_pb2
from google.protobuf.internal import containers as _containers
from google.protobuf.internal import enum_type_wrapper as _enum_type_wrapper
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from typing import ClassVar as _ClassVar, Iterable as _Iterable, Mapping as _Mapping, Optional as _Optional, Union as _Union

DESCRIPTOR: _descriptor.FileDescriptor
LOOP_STATE_CALIBRATING: LoopState
LOOP_STATE_CLOSED: LoopState
LOOP_STATE_HOLD: LoopState
LOOP_STATE_OPEN: LoopState
LOOP_STATE_TRIPPED: LoopState
LOOP_STATE_UNSPECIFIED: LoopState
PIXEL_CALIBRATION_KIND_DARK: PixelCalibrationKind
PIXEL_CALIBRATION_KIND_FLAT: PixelCalibrationKind
PIXEL_CALIBRATION_KIND_REFERENCE: PixelCalibrationKind
PIXEL_CALIBRATION_KIND_UNSPECIFIED: PixelCalibrationKind

class CalibrateRequest(_message.Message):
    __slots__ = ["amplitude_m", "basis", "frames_per_pattern", "hadamard", "max_condition", "modes_kept", "single_pokes", "tikhonov"]
    AMPLITUDE_M_FIELD_NUMBER: _ClassVar[int]
    BASIS_FIELD_NUMBER: _ClassVar[int]
    FRAMES_PER_PATTERN_FIELD_NUMBER: _ClassVar[int]
    HADAMARD_FIELD_NUMBER: _ClassVar[int]
    MAX_CONDITION_FIELD_NUMBER: _ClassVar[int]
    MODES_KEPT_FIELD_NUMBER: _ClassVar[int]
    SINGLE_POKES_FIELD_NUMBER: _ClassVar[int]
    TIKHONOV_FIELD_NUMBER: _ClassVar[int]
    amplitude_m: float
    basis: str
    frames_per_pattern: int
    hadamard: bool
    max_condition: float
    modes_kept: int
    single_pokes: bool
    tikhonov: float
    def __init__(self, amplitude_m: _Optional[float] = ..., frames_per_pattern: _Optional[int] = ..., hadamard: bool = ..., modes_kept: _Optional[int] = ..., max_condition: _Optional[float] = ..., tikhonov: _Optional[float] = ..., single_pokes: bool = ..., basis: _Optional[str] = ...) -> None: ...

class CalibrateResponse(_message.Message):
    __slots__ = ["done", "phase", "reconstructor", "total"]
    DONE_FIELD_NUMBER: _ClassVar[int]
    PHASE_FIELD_NUMBER: _ClassVar[int]
    RECONSTRUCTOR_FIELD_NUMBER: _ClassVar[int]
    TOTAL_FIELD_NUMBER: _ClassVar[int]
    done: int
    phase: str
    reconstructor: ReconstructorInfo
    total: int
    def __init__(self, phase: _Optional[str] = ..., done: _Optional[int] = ..., total: _Optional[int] = ..., reconstructor: _Optional[_Union[ReconstructorInfo, _Mapping]] = ...) -> None: ...

class CapturePixelCalibrationRequest(_message.Message):
    __slots__ = ["frames", "kind"]
    FRAMES_FIELD_NUMBER: _ClassVar[int]
    KIND_FIELD_NUMBER: _ClassVar[int]
    frames: int
    kind: PixelCalibrationKind
    def __init__(self, kind: _Optional[_Union[PixelCalibrationKind, str]] = ..., frames: _Optional[int] = ...) -> None: ...

class CapturePixelCalibrationResponse(_message.Message):
    __slots__ = ["file", "frames", "kind", "mean", "rms"]
    FILE_FIELD_NUMBER: _ClassVar[int]
    FRAMES_FIELD_NUMBER: _ClassVar[int]
    KIND_FIELD_NUMBER: _ClassVar[int]
    MEAN_FIELD_NUMBER: _ClassVar[int]
    RMS_FIELD_NUMBER: _ClassVar[int]
    file: str
    frames: int
    kind: PixelCalibrationKind
    mean: float
    rms: float
    def __init__(self, kind: _Optional[_Union[PixelCalibrationKind, str]] = ..., frames: _Optional[int] = ..., mean: _Optional[float] = ..., rms: _Optional[float] = ..., file: _Optional[str] = ...) -> None: ...

class CloseLoopRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class CloseLoopResponse(_message.Message):
    __slots__ = ["status"]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    status: GetStatusResponse
    def __init__(self, status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class GetStatusRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class GetStatusResponse(_message.Message):
    __slots__ = ["actuator_count", "camera_connected", "end_to_end_latency", "frame_rate_hz", "frames", "frames_dropped", "frames_rejected", "gain", "interlock_trips", "last_frame", "last_interlock", "leak", "mirror_connected", "reconstructor", "residual_slope_rms_rad", "residual_wavefront_rms_m", "rtc_latency", "saturated_actuators", "science_wavelength_m", "slope_count", "state", "strehl_estimate", "supervisor_state", "tip_tilt"]
    ACTUATOR_COUNT_FIELD_NUMBER: _ClassVar[int]
    CAMERA_CONNECTED_FIELD_NUMBER: _ClassVar[int]
    END_TO_END_LATENCY_FIELD_NUMBER: _ClassVar[int]
    FRAMES_DROPPED_FIELD_NUMBER: _ClassVar[int]
    FRAMES_FIELD_NUMBER: _ClassVar[int]
    FRAMES_REJECTED_FIELD_NUMBER: _ClassVar[int]
    FRAME_RATE_HZ_FIELD_NUMBER: _ClassVar[int]
    GAIN_FIELD_NUMBER: _ClassVar[int]
    INTERLOCK_TRIPS_FIELD_NUMBER: _ClassVar[int]
    LAST_FRAME_FIELD_NUMBER: _ClassVar[int]
    LAST_INTERLOCK_FIELD_NUMBER: _ClassVar[int]
    LEAK_FIELD_NUMBER: _ClassVar[int]
    MIRROR_CONNECTED_FIELD_NUMBER: _ClassVar[int]
    RECONSTRUCTOR_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_SLOPE_RMS_RAD_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_WAVEFRONT_RMS_M_FIELD_NUMBER: _ClassVar[int]
    RTC_LATENCY_FIELD_NUMBER: _ClassVar[int]
    SATURATED_ACTUATORS_FIELD_NUMBER: _ClassVar[int]
    SCIENCE_WAVELENGTH_M_FIELD_NUMBER: _ClassVar[int]
    SLOPE_COUNT_FIELD_NUMBER: _ClassVar[int]
    STATE_FIELD_NUMBER: _ClassVar[int]
    STREHL_ESTIMATE_FIELD_NUMBER: _ClassVar[int]
    SUPERVISOR_STATE_FIELD_NUMBER: _ClassVar[int]
    TIP_TILT_FIELD_NUMBER: _ClassVar[int]
    actuator_count: int
    camera_connected: bool
    end_to_end_latency: LatencySummary
    frame_rate_hz: float
    frames: int
    frames_dropped: int
    frames_rejected: int
    gain: float
    interlock_trips: int
    last_frame: int
    last_interlock: str
    leak: float
    mirror_connected: bool
    reconstructor: ReconstructorInfo
    residual_slope_rms_rad: float
    residual_wavefront_rms_m: float
    rtc_latency: LatencySummary
    saturated_actuators: int
    science_wavelength_m: float
    slope_count: int
    state: LoopState
    strehl_estimate: float
    supervisor_state: str
    tip_tilt: TipTiltStatus
    def __init__(self, state: _Optional[_Union[LoopState, str]] = ..., gain: _Optional[float] = ..., leak: _Optional[float] = ..., frames: _Optional[int] = ..., frames_dropped: _Optional[int] = ..., frames_rejected: _Optional[int] = ..., last_frame: _Optional[int] = ..., slope_count: _Optional[int] = ..., actuator_count: _Optional[int] = ..., frame_rate_hz: _Optional[float] = ..., reconstructor: _Optional[_Union[ReconstructorInfo, _Mapping]] = ..., residual_slope_rms_rad: _Optional[float] = ..., residual_wavefront_rms_m: _Optional[float] = ..., strehl_estimate: _Optional[float] = ..., science_wavelength_m: _Optional[float] = ..., saturated_actuators: _Optional[int] = ..., rtc_latency: _Optional[_Union[LatencySummary, _Mapping]] = ..., end_to_end_latency: _Optional[_Union[LatencySummary, _Mapping]] = ..., interlock_trips: _Optional[int] = ..., last_interlock: _Optional[str] = ..., camera_connected: bool = ..., mirror_connected: bool = ..., tip_tilt: _Optional[_Union[TipTiltStatus, _Mapping]] = ..., supervisor_state: _Optional[str] = ...) -> None: ...

class HoldLoopRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class HoldLoopResponse(_message.Message):
    __slots__ = ["status"]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    status: GetStatusResponse
    def __init__(self, status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class LatencySummary(_message.Message):
    __slots__ = ["count", "max", "p50", "p99", "p999"]
    COUNT_FIELD_NUMBER: _ClassVar[int]
    MAX_FIELD_NUMBER: _ClassVar[int]
    P50_FIELD_NUMBER: _ClassVar[int]
    P999_FIELD_NUMBER: _ClassVar[int]
    P99_FIELD_NUMBER: _ClassVar[int]
    count: int
    max: float
    p50: float
    p99: float
    p999: float
    def __init__(self, p50: _Optional[float] = ..., p99: _Optional[float] = ..., p999: _Optional[float] = ..., max: _Optional[float] = ..., count: _Optional[int] = ...) -> None: ...

class LoadReconstructorRequest(_message.Message):
    __slots__ = ["chunk"]
    CHUNK_FIELD_NUMBER: _ClassVar[int]
    chunk: bytes
    def __init__(self, chunk: _Optional[bytes] = ...) -> None: ...

class LoadReconstructorResponse(_message.Message):
    __slots__ = ["reconstructor"]
    RECONSTRUCTOR_FIELD_NUMBER: _ClassVar[int]
    reconstructor: ReconstructorInfo
    def __init__(self, reconstructor: _Optional[_Union[ReconstructorInfo, _Mapping]] = ...) -> None: ...

class OpenLoopRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class OpenLoopResponse(_message.Message):
    __slots__ = ["status"]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    status: GetStatusResponse
    def __init__(self, status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class OptimiseModalGainsRequest(_message.Message):
    __slots__ = ["dry_run", "frames"]
    DRY_RUN_FIELD_NUMBER: _ClassVar[int]
    FRAMES_FIELD_NUMBER: _ClassVar[int]
    dry_run: bool
    frames: int
    def __init__(self, frames: _Optional[int] = ..., dry_run: bool = ...) -> None: ...

class OptimiseModalGainsResponse(_message.Message):
    __slots__ = ["gains", "predicted_residual_after", "predicted_residual_before", "status"]
    GAINS_FIELD_NUMBER: _ClassVar[int]
    PREDICTED_RESIDUAL_AFTER_FIELD_NUMBER: _ClassVar[int]
    PREDICTED_RESIDUAL_BEFORE_FIELD_NUMBER: _ClassVar[int]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    gains: _containers.RepeatedScalarFieldContainer[float]
    predicted_residual_after: float
    predicted_residual_before: float
    status: GetStatusResponse
    def __init__(self, gains: _Optional[_Iterable[float]] = ..., predicted_residual_before: _Optional[float] = ..., predicted_residual_after: _Optional[float] = ..., status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class ReconstructorInfo(_message.Message):
    __slots__ = ["actuator_count", "basis", "condition_number", "created_unix", "method", "mode_count", "modes_kept", "singular_values", "slope_count"]
    ACTUATOR_COUNT_FIELD_NUMBER: _ClassVar[int]
    BASIS_FIELD_NUMBER: _ClassVar[int]
    CONDITION_NUMBER_FIELD_NUMBER: _ClassVar[int]
    CREATED_UNIX_FIELD_NUMBER: _ClassVar[int]
    METHOD_FIELD_NUMBER: _ClassVar[int]
    MODES_KEPT_FIELD_NUMBER: _ClassVar[int]
    MODE_COUNT_FIELD_NUMBER: _ClassVar[int]
    SINGULAR_VALUES_FIELD_NUMBER: _ClassVar[int]
    SLOPE_COUNT_FIELD_NUMBER: _ClassVar[int]
    actuator_count: int
    basis: str
    condition_number: float
    created_unix: int
    method: str
    mode_count: int
    modes_kept: int
    singular_values: _containers.RepeatedScalarFieldContainer[float]
    slope_count: int
    def __init__(self, method: _Optional[str] = ..., modes_kept: _Optional[int] = ..., slope_count: _Optional[int] = ..., actuator_count: _Optional[int] = ..., condition_number: _Optional[float] = ..., created_unix: _Optional[int] = ..., singular_values: _Optional[_Iterable[float]] = ..., basis: _Optional[str] = ..., mode_count: _Optional[int] = ...) -> None: ...

class RecordTelemetryRequest(_message.Message):
    __slots__ = ["frame_count"]
    FRAME_COUNT_FIELD_NUMBER: _ClassVar[int]
    frame_count: int
    def __init__(self, frame_count: _Optional[int] = ...) -> None: ...

class RecordTelemetryResponse(_message.Message):
    __slots__ = ["frames", "header", "reconstructor_chunk"]
    FRAMES_FIELD_NUMBER: _ClassVar[int]
    HEADER_FIELD_NUMBER: _ClassVar[int]
    RECONSTRUCTOR_CHUNK_FIELD_NUMBER: _ClassVar[int]
    frames: RecordedFrames
    header: RecordingHeader
    reconstructor_chunk: bytes
    def __init__(self, header: _Optional[_Union[RecordingHeader, _Mapping]] = ..., frames: _Optional[_Union[RecordedFrames, _Mapping]] = ..., reconstructor_chunk: _Optional[bytes] = ...) -> None: ...

class RecordedFrames(_message.Message):
    __slots__ = ["commands", "computed_ns", "frame_numbers", "readout_end_ns", "received_ns", "residual_wavefront_rms_m", "saturated_actuators", "sent_ns", "slopes", "states", "strehl_estimate"]
    COMMANDS_FIELD_NUMBER: _ClassVar[int]
    COMPUTED_NS_FIELD_NUMBER: _ClassVar[int]
    FRAME_NUMBERS_FIELD_NUMBER: _ClassVar[int]
    READOUT_END_NS_FIELD_NUMBER: _ClassVar[int]
    RECEIVED_NS_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_WAVEFRONT_RMS_M_FIELD_NUMBER: _ClassVar[int]
    SATURATED_ACTUATORS_FIELD_NUMBER: _ClassVar[int]
    SENT_NS_FIELD_NUMBER: _ClassVar[int]
    SLOPES_FIELD_NUMBER: _ClassVar[int]
    STATES_FIELD_NUMBER: _ClassVar[int]
    STREHL_ESTIMATE_FIELD_NUMBER: _ClassVar[int]
    commands: _containers.RepeatedScalarFieldContainer[float]
    computed_ns: _containers.RepeatedScalarFieldContainer[int]
    frame_numbers: _containers.RepeatedScalarFieldContainer[int]
    readout_end_ns: _containers.RepeatedScalarFieldContainer[int]
    received_ns: _containers.RepeatedScalarFieldContainer[int]
    residual_wavefront_rms_m: _containers.RepeatedScalarFieldContainer[float]
    saturated_actuators: _containers.RepeatedScalarFieldContainer[int]
    sent_ns: _containers.RepeatedScalarFieldContainer[int]
    slopes: _containers.RepeatedScalarFieldContainer[float]
    states: _containers.RepeatedScalarFieldContainer[LoopState]
    strehl_estimate: _containers.RepeatedScalarFieldContainer[float]
    def __init__(self, frame_numbers: _Optional[_Iterable[int]] = ..., readout_end_ns: _Optional[_Iterable[int]] = ..., received_ns: _Optional[_Iterable[int]] = ..., computed_ns: _Optional[_Iterable[int]] = ..., sent_ns: _Optional[_Iterable[int]] = ..., states: _Optional[_Iterable[_Union[LoopState, str]]] = ..., saturated_actuators: _Optional[_Iterable[int]] = ..., residual_wavefront_rms_m: _Optional[_Iterable[float]] = ..., strehl_estimate: _Optional[_Iterable[float]] = ..., slopes: _Optional[_Iterable[float]] = ..., commands: _Optional[_Iterable[float]] = ...) -> None: ...

class RecordingHeader(_message.Message):
    __slots__ = ["camera", "gain", "leak", "mirror", "modal_gains", "reconstructor", "reconstructor_file_bytes", "science_wavelength_m", "started_unix_ns", "window_frames"]
    CAMERA_FIELD_NUMBER: _ClassVar[int]
    GAIN_FIELD_NUMBER: _ClassVar[int]
    LEAK_FIELD_NUMBER: _ClassVar[int]
    MIRROR_FIELD_NUMBER: _ClassVar[int]
    MODAL_GAINS_FIELD_NUMBER: _ClassVar[int]
    RECONSTRUCTOR_FIELD_NUMBER: _ClassVar[int]
    RECONSTRUCTOR_FILE_BYTES_FIELD_NUMBER: _ClassVar[int]
    SCIENCE_WAVELENGTH_M_FIELD_NUMBER: _ClassVar[int]
    STARTED_UNIX_NS_FIELD_NUMBER: _ClassVar[int]
    WINDOW_FRAMES_FIELD_NUMBER: _ClassVar[int]
    camera: _camera_pb2.CameraServiceDescribeResponse
    gain: float
    leak: float
    mirror: _mirror_pb2.MirrorServiceDescribeResponse
    modal_gains: _containers.RepeatedScalarFieldContainer[float]
    reconstructor: ReconstructorInfo
    reconstructor_file_bytes: int
    science_wavelength_m: float
    started_unix_ns: int
    window_frames: int
    def __init__(self, camera: _Optional[_Union[_camera_pb2.CameraServiceDescribeResponse, _Mapping]] = ..., mirror: _Optional[_Union[_mirror_pb2.MirrorServiceDescribeResponse, _Mapping]] = ..., gain: _Optional[float] = ..., leak: _Optional[float] = ..., modal_gains: _Optional[_Iterable[float]] = ..., science_wavelength_m: _Optional[float] = ..., reconstructor: _Optional[_Union[ReconstructorInfo, _Mapping]] = ..., reconstructor_file_bytes: _Optional[int] = ..., window_frames: _Optional[int] = ..., started_unix_ns: _Optional[int] = ...) -> None: ...

class ResumeAutonomousRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class ResumeAutonomousResponse(_message.Message):
    __slots__ = ["status"]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    status: GetStatusResponse
    def __init__(self, status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class SaveReconstructorRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class SaveReconstructorResponse(_message.Message):
    __slots__ = ["chunk"]
    CHUNK_FIELD_NUMBER: _ClassVar[int]
    chunk: bytes
    def __init__(self, chunk: _Optional[bytes] = ...) -> None: ...

class SetGainRequest(_message.Message):
    __slots__ = ["gain"]
    GAIN_FIELD_NUMBER: _ClassVar[int]
    gain: float
    def __init__(self, gain: _Optional[float] = ...) -> None: ...

class SetGainResponse(_message.Message):
    __slots__ = ["status"]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    status: GetStatusResponse
    def __init__(self, status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class SetLeakRequest(_message.Message):
    __slots__ = ["leak"]
    LEAK_FIELD_NUMBER: _ClassVar[int]
    leak: float
    def __init__(self, leak: _Optional[float] = ...) -> None: ...

class SetLeakResponse(_message.Message):
    __slots__ = ["status"]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    status: GetStatusResponse
    def __init__(self, status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class SetModalGainsRequest(_message.Message):
    __slots__ = ["gains"]
    GAINS_FIELD_NUMBER: _ClassVar[int]
    gains: _containers.RepeatedScalarFieldContainer[float]
    def __init__(self, gains: _Optional[_Iterable[float]] = ...) -> None: ...

class SetModalGainsResponse(_message.Message):
    __slots__ = ["status"]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    status: GetStatusResponse
    def __init__(self, status: _Optional[_Union[GetStatusResponse, _Mapping]] = ...) -> None: ...

class StreamTelemetryRequest(_message.Message):
    __slots__ = ["decimation"]
    DECIMATION_FIELD_NUMBER: _ClassVar[int]
    decimation: int
    def __init__(self, decimation: _Optional[int] = ...) -> None: ...

class StreamTelemetryResponse(_message.Message):
    __slots__ = ["commands", "frame_number", "residual_slope_rms_rad", "residual_wavefront_rms_m", "rtc_latency_s", "saturated_actuators", "slopes", "state", "strehl_estimate"]
    COMMANDS_FIELD_NUMBER: _ClassVar[int]
    FRAME_NUMBER_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_SLOPE_RMS_RAD_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_WAVEFRONT_RMS_M_FIELD_NUMBER: _ClassVar[int]
    RTC_LATENCY_S_FIELD_NUMBER: _ClassVar[int]
    SATURATED_ACTUATORS_FIELD_NUMBER: _ClassVar[int]
    SLOPES_FIELD_NUMBER: _ClassVar[int]
    STATE_FIELD_NUMBER: _ClassVar[int]
    STREHL_ESTIMATE_FIELD_NUMBER: _ClassVar[int]
    commands: _containers.RepeatedScalarFieldContainer[float]
    frame_number: int
    residual_slope_rms_rad: float
    residual_wavefront_rms_m: float
    rtc_latency_s: float
    saturated_actuators: int
    slopes: _containers.RepeatedScalarFieldContainer[float]
    state: LoopState
    strehl_estimate: float
    def __init__(self, frame_number: _Optional[int] = ..., state: _Optional[_Union[LoopState, str]] = ..., slopes: _Optional[_Iterable[float]] = ..., commands: _Optional[_Iterable[float]] = ..., residual_slope_rms_rad: _Optional[float] = ..., residual_wavefront_rms_m: _Optional[float] = ..., strehl_estimate: _Optional[float] = ..., saturated_actuators: _Optional[int] = ..., rtc_latency_s: _Optional[float] = ...) -> None: ...

class TipTiltStatus(_message.Message):
    __slots__ = ["command_x_rad", "command_y_rad", "commands", "connected", "frames", "gain", "offload_gain", "residual_rms_rad", "saturated_frames", "stroke_rad"]
    COMMANDS_FIELD_NUMBER: _ClassVar[int]
    COMMAND_X_RAD_FIELD_NUMBER: _ClassVar[int]
    COMMAND_Y_RAD_FIELD_NUMBER: _ClassVar[int]
    CONNECTED_FIELD_NUMBER: _ClassVar[int]
    FRAMES_FIELD_NUMBER: _ClassVar[int]
    GAIN_FIELD_NUMBER: _ClassVar[int]
    OFFLOAD_GAIN_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_RMS_RAD_FIELD_NUMBER: _ClassVar[int]
    SATURATED_FRAMES_FIELD_NUMBER: _ClassVar[int]
    STROKE_RAD_FIELD_NUMBER: _ClassVar[int]
    command_x_rad: float
    command_y_rad: float
    commands: int
    connected: bool
    frames: int
    gain: float
    offload_gain: float
    residual_rms_rad: float
    saturated_frames: int
    stroke_rad: float
    def __init__(self, connected: bool = ..., frames: _Optional[int] = ..., commands: _Optional[int] = ..., residual_rms_rad: _Optional[float] = ..., command_x_rad: _Optional[float] = ..., command_y_rad: _Optional[float] = ..., stroke_rad: _Optional[float] = ..., saturated_frames: _Optional[int] = ..., gain: _Optional[float] = ..., offload_gain: _Optional[float] = ...) -> None: ...

class LoopState(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []

class PixelCalibrationKind(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []
