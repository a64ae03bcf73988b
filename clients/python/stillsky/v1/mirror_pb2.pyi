from google.protobuf.internal import containers as _containers
from google.protobuf.internal import enum_type_wrapper as _enum_type_wrapper
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from typing import ClassVar as _ClassVar, Iterable as _Iterable, Optional as _Optional, Union as _Union

DESCRIPTOR: _descriptor.FileDescriptor
MIRROR_KIND_DEFORMABLE: MirrorKind
MIRROR_KIND_TIP_TILT: MirrorKind
MIRROR_KIND_UNSPECIFIED: MirrorKind

class MirrorServiceDescribeRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class MirrorServiceDescribeResponse(_message.Message):
    __slots__ = ["actuator_count", "actuators_across", "command_unit", "coupling", "mirror_kind", "pitch_m", "positions_m", "protocol_version", "stroke_m", "stroke_rad"]
    ACTUATORS_ACROSS_FIELD_NUMBER: _ClassVar[int]
    ACTUATOR_COUNT_FIELD_NUMBER: _ClassVar[int]
    COMMAND_UNIT_FIELD_NUMBER: _ClassVar[int]
    COUPLING_FIELD_NUMBER: _ClassVar[int]
    MIRROR_KIND_FIELD_NUMBER: _ClassVar[int]
    PITCH_M_FIELD_NUMBER: _ClassVar[int]
    POSITIONS_M_FIELD_NUMBER: _ClassVar[int]
    PROTOCOL_VERSION_FIELD_NUMBER: _ClassVar[int]
    STROKE_M_FIELD_NUMBER: _ClassVar[int]
    STROKE_RAD_FIELD_NUMBER: _ClassVar[int]
    actuator_count: int
    actuators_across: int
    command_unit: str
    coupling: float
    mirror_kind: MirrorKind
    pitch_m: float
    positions_m: _containers.RepeatedScalarFieldContainer[float]
    protocol_version: int
    stroke_m: float
    stroke_rad: float
    def __init__(self, actuator_count: _Optional[int] = ..., actuators_across: _Optional[int] = ..., positions_m: _Optional[_Iterable[float]] = ..., pitch_m: _Optional[float] = ..., stroke_m: _Optional[float] = ..., command_unit: _Optional[str] = ..., coupling: _Optional[float] = ..., protocol_version: _Optional[int] = ..., mirror_kind: _Optional[_Union[MirrorKind, str]] = ..., stroke_rad: _Optional[float] = ...) -> None: ...

class StreamCommandsRequest(_message.Message):
    __slots__ = ["ack_batch", "frame_number", "values"]
    ACK_BATCH_FIELD_NUMBER: _ClassVar[int]
    FRAME_NUMBER_FIELD_NUMBER: _ClassVar[int]
    VALUES_FIELD_NUMBER: _ClassVar[int]
    ack_batch: int
    frame_number: int
    values: _containers.RepeatedScalarFieldContainer[float]
    def __init__(self, frame_number: _Optional[int] = ..., values: _Optional[_Iterable[float]] = ..., ack_batch: _Optional[int] = ...) -> None: ...

class StreamCommandsResponse(_message.Message):
    __slots__ = ["clipped", "earlier_clipped", "earlier_frame_numbers", "earlier_received_ns", "frame_number", "received_ns"]
    CLIPPED_FIELD_NUMBER: _ClassVar[int]
    EARLIER_CLIPPED_FIELD_NUMBER: _ClassVar[int]
    EARLIER_FRAME_NUMBERS_FIELD_NUMBER: _ClassVar[int]
    EARLIER_RECEIVED_NS_FIELD_NUMBER: _ClassVar[int]
    FRAME_NUMBER_FIELD_NUMBER: _ClassVar[int]
    RECEIVED_NS_FIELD_NUMBER: _ClassVar[int]
    clipped: int
    earlier_clipped: _containers.RepeatedScalarFieldContainer[int]
    earlier_frame_numbers: _containers.RepeatedScalarFieldContainer[int]
    earlier_received_ns: _containers.RepeatedScalarFieldContainer[int]
    frame_number: int
    received_ns: int
    def __init__(self, frame_number: _Optional[int] = ..., received_ns: _Optional[int] = ..., clipped: _Optional[int] = ..., earlier_frame_numbers: _Optional[_Iterable[int]] = ..., earlier_received_ns: _Optional[_Iterable[int]] = ..., earlier_clipped: _Optional[_Iterable[int]] = ...) -> None: ...

class MirrorKind(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []
