from google.protobuf.internal import containers as _containers
from google.protobuf.internal import enum_type_wrapper as _enum_type_wrapper
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from typing import ClassVar as _ClassVar, Iterable as _Iterable, Mapping as _Mapping, Optional as _Optional, Union as _Union

CENTROID_METHOD_COG: CentroidMethod
CENTROID_METHOD_UNSPECIFIED: CentroidMethod
CENTROID_METHOD_WEIGHTED: CentroidMethod
DESCRIPTOR: _descriptor.FileDescriptor
SENSOR_KIND_QUAD_CELL: SensorKind
SENSOR_KIND_SHACK_HARTMANN: SensorKind
SENSOR_KIND_UNSPECIFIED: SensorKind
SOURCE_CALIBRATION: Source
SOURCE_DARK: Source
SOURCE_FLAT: Source
SOURCE_SKY: Source
SOURCE_UNSPECIFIED: Source

class CameraServiceDescribeRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class CameraServiceDescribeResponse(_message.Message):
    __slots__ = ["delay_frames", "description", "frame_rate_hz", "lockstep", "obstruction", "pixels", "pupil_diameter_m", "retinal_beacon", "sensor_kind", "slope_count", "slope_unit", "star_magnitude", "subaperture_size_m", "subapertures", "valid_subapertures", "wavelength_m", "zenith_deg"]
    DELAY_FRAMES_FIELD_NUMBER: _ClassVar[int]
    DESCRIPTION_FIELD_NUMBER: _ClassVar[int]
    FRAME_RATE_HZ_FIELD_NUMBER: _ClassVar[int]
    LOCKSTEP_FIELD_NUMBER: _ClassVar[int]
    OBSTRUCTION_FIELD_NUMBER: _ClassVar[int]
    PIXELS_FIELD_NUMBER: _ClassVar[int]
    PUPIL_DIAMETER_M_FIELD_NUMBER: _ClassVar[int]
    RETINAL_BEACON_FIELD_NUMBER: _ClassVar[int]
    SENSOR_KIND_FIELD_NUMBER: _ClassVar[int]
    SLOPE_COUNT_FIELD_NUMBER: _ClassVar[int]
    SLOPE_UNIT_FIELD_NUMBER: _ClassVar[int]
    STAR_MAGNITUDE_FIELD_NUMBER: _ClassVar[int]
    SUBAPERTURES_FIELD_NUMBER: _ClassVar[int]
    SUBAPERTURE_SIZE_M_FIELD_NUMBER: _ClassVar[int]
    VALID_SUBAPERTURES_FIELD_NUMBER: _ClassVar[int]
    WAVELENGTH_M_FIELD_NUMBER: _ClassVar[int]
    ZENITH_DEG_FIELD_NUMBER: _ClassVar[int]
    delay_frames: int
    description: str
    frame_rate_hz: float
    lockstep: bool
    obstruction: float
    pixels: PixelGeometry
    pupil_diameter_m: float
    retinal_beacon: RetinalBeacon
    sensor_kind: SensorKind
    slope_count: int
    slope_unit: str
    star_magnitude: float
    subaperture_size_m: float
    subapertures: int
    valid_subapertures: _containers.RepeatedScalarFieldContainer[int]
    wavelength_m: float
    zenith_deg: float
    def __init__(self, subapertures: _Optional[int] = ..., valid_subapertures: _Optional[_Iterable[int]] = ..., slope_count: _Optional[int] = ..., frame_rate_hz: _Optional[float] = ..., subaperture_size_m: _Optional[float] = ..., pupil_diameter_m: _Optional[float] = ..., wavelength_m: _Optional[float] = ..., slope_unit: _Optional[str] = ..., lockstep: bool = ..., delay_frames: _Optional[int] = ..., description: _Optional[str] = ..., zenith_deg: _Optional[float] = ..., obstruction: _Optional[float] = ..., sensor_kind: _Optional[_Union[SensorKind, str]] = ..., star_magnitude: _Optional[float] = ..., pixels: _Optional[_Union[PixelGeometry, _Mapping]] = ..., retinal_beacon: _Optional[_Union[RetinalBeacon, _Mapping]] = ...) -> None: ...

class PixelGeometry(_message.Message):
    __slots__ = ["bias_adu", "centroid", "gain_e_per_adu", "height", "pixel_scale_rad", "pixels_per_subaperture", "read_noise_e", "saturation_adu", "threshold", "weight_sigma_px", "width"]
    BIAS_ADU_FIELD_NUMBER: _ClassVar[int]
    CENTROID_FIELD_NUMBER: _ClassVar[int]
    GAIN_E_PER_ADU_FIELD_NUMBER: _ClassVar[int]
    HEIGHT_FIELD_NUMBER: _ClassVar[int]
    PIXELS_PER_SUBAPERTURE_FIELD_NUMBER: _ClassVar[int]
    PIXEL_SCALE_RAD_FIELD_NUMBER: _ClassVar[int]
    READ_NOISE_E_FIELD_NUMBER: _ClassVar[int]
    SATURATION_ADU_FIELD_NUMBER: _ClassVar[int]
    THRESHOLD_FIELD_NUMBER: _ClassVar[int]
    WEIGHT_SIGMA_PX_FIELD_NUMBER: _ClassVar[int]
    WIDTH_FIELD_NUMBER: _ClassVar[int]
    bias_adu: float
    centroid: CentroidMethod
    gain_e_per_adu: float
    height: int
    pixel_scale_rad: float
    pixels_per_subaperture: int
    read_noise_e: float
    saturation_adu: int
    threshold: float
    weight_sigma_px: float
    width: int
    def __init__(self, pixels_per_subaperture: _Optional[int] = ..., width: _Optional[int] = ..., height: _Optional[int] = ..., pixel_scale_rad: _Optional[float] = ..., bias_adu: _Optional[float] = ..., saturation_adu: _Optional[int] = ..., gain_e_per_adu: _Optional[float] = ..., centroid: _Optional[_Union[CentroidMethod, str]] = ..., threshold: _Optional[float] = ..., weight_sigma_px: _Optional[float] = ..., read_noise_e: _Optional[float] = ...) -> None: ...

class RetinalBeacon(_message.Message):
    __slots__ = ["exposure_limit_j", "exposure_s", "power_w"]
    EXPOSURE_LIMIT_J_FIELD_NUMBER: _ClassVar[int]
    EXPOSURE_S_FIELD_NUMBER: _ClassVar[int]
    POWER_W_FIELD_NUMBER: _ClassVar[int]
    exposure_limit_j: float
    exposure_s: float
    power_w: float
    def __init__(self, power_w: _Optional[float] = ..., exposure_s: _Optional[float] = ..., exposure_limit_j: _Optional[float] = ...) -> None: ...

class SetAcquisitionRequest(_message.Message):
    __slots__ = ["paused"]
    PAUSED_FIELD_NUMBER: _ClassVar[int]
    paused: bool
    def __init__(self, paused: bool = ...) -> None: ...

class SetAcquisitionResponse(_message.Message):
    __slots__ = ["paused"]
    PAUSED_FIELD_NUMBER: _ClassVar[int]
    paused: bool
    def __init__(self, paused: bool = ...) -> None: ...

class SetSourceRequest(_message.Message):
    __slots__ = ["source"]
    SOURCE_FIELD_NUMBER: _ClassVar[int]
    source: Source
    def __init__(self, source: _Optional[_Union[Source, str]] = ...) -> None: ...

class SetSourceResponse(_message.Message):
    __slots__ = ["source"]
    SOURCE_FIELD_NUMBER: _ClassVar[int]
    source: Source
    def __init__(self, source: _Optional[_Union[Source, str]] = ...) -> None: ...

class StreamFramesRequest(_message.Message):
    __slots__ = ["chunks"]
    CHUNKS_FIELD_NUMBER: _ClassVar[int]
    chunks: int
    def __init__(self, chunks: _Optional[int] = ...) -> None: ...

class StreamFramesResponse(_message.Message):
    __slots__ = ["chunk_count", "chunk_index", "first_row", "flux_electrons", "frame_number", "offset", "pixels", "readout_end_ns", "row_count", "slopes"]
    CHUNK_COUNT_FIELD_NUMBER: _ClassVar[int]
    CHUNK_INDEX_FIELD_NUMBER: _ClassVar[int]
    FIRST_ROW_FIELD_NUMBER: _ClassVar[int]
    FLUX_ELECTRONS_FIELD_NUMBER: _ClassVar[int]
    FRAME_NUMBER_FIELD_NUMBER: _ClassVar[int]
    OFFSET_FIELD_NUMBER: _ClassVar[int]
    PIXELS_FIELD_NUMBER: _ClassVar[int]
    READOUT_END_NS_FIELD_NUMBER: _ClassVar[int]
    ROW_COUNT_FIELD_NUMBER: _ClassVar[int]
    SLOPES_FIELD_NUMBER: _ClassVar[int]
    chunk_count: int
    chunk_index: int
    first_row: int
    flux_electrons: float
    frame_number: int
    offset: int
    pixels: bytes
    readout_end_ns: int
    row_count: int
    slopes: _containers.RepeatedScalarFieldContainer[float]
    def __init__(self, frame_number: _Optional[int] = ..., readout_end_ns: _Optional[int] = ..., offset: _Optional[int] = ..., chunk_index: _Optional[int] = ..., chunk_count: _Optional[int] = ..., slopes: _Optional[_Iterable[float]] = ..., flux_electrons: _Optional[float] = ..., pixels: _Optional[bytes] = ..., first_row: _Optional[int] = ..., row_count: _Optional[int] = ...) -> None: ...

class Source(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []

class CentroidMethod(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []

class SensorKind(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []
