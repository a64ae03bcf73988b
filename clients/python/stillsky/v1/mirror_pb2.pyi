from google.protobuf.internal import containers as _containers
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from typing import ClassVar as _ClassVar, Iterable as _Iterable, Optional as _Optional

DESCRIPTOR: _descriptor.FileDescriptor

class MirrorServiceDescribeRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class MirrorServiceDescribeResponse(_message.Message):
    __slots__ = ["actuator_count", "actuators_across", "command_unit", "coupling", "pitch_m", "positions_m", "stroke_m"]
    ACTUATORS_ACROSS_FIELD_NUMBER: _ClassVar[int]
    ACTUATOR_COUNT_FIELD_NUMBER: _ClassVar[int]
    COMMAND_UNIT_FIELD_NUMBER: _ClassVar[int]
    COUPLING_FIELD_NUMBER: _ClassVar[int]
    PITCH_M_FIELD_NUMBER: _ClassVar[int]
    POSITIONS_M_FIELD_NUMBER: _ClassVar[int]
    STROKE_M_FIELD_NUMBER: _ClassVar[int]
    actuator_count: int
    actuators_across: int
    command_unit: str
    coupling: float
    pitch_m: float
    positions_m: _containers.RepeatedScalarFieldContainer[float]
    stroke_m: float
    def __init__(self, actuator_count: _Optional[int] = ..., actuators_across: _Optional[int] = ..., positions_m: _Optional[_Iterable[float]] = ..., pitch_m: _Optional[float] = ..., stroke_m: _Optional[float] = ..., command_unit: _Optional[str] = ..., coupling: _Optional[float] = ...) -> None: ...

class StreamCommandsRequest(_message.Message):
    __slots__ = ["frame_number", "values"]
    FRAME_NUMBER_FIELD_NUMBER: _ClassVar[int]
    VALUES_FIELD_NUMBER: _ClassVar[int]
    frame_number: int
    values: _containers.RepeatedScalarFieldContainer[float]
    def __init__(self, frame_number: _Optional[int] = ..., values: _Optional[_Iterable[float]] = ...) -> None: ...

class StreamCommandsResponse(_message.Message):
    __slots__ = ["clipped", "frame_number", "received_ns"]
    CLIPPED_FIELD_NUMBER: _ClassVar[int]
    FRAME_NUMBER_FIELD_NUMBER: _ClassVar[int]
    RECEIVED_NS_FIELD_NUMBER: _ClassVar[int]
    clipped: int
    frame_number: int
    received_ns: int
    def __init__(self, frame_number: _Optional[int] = ..., received_ns: _Optional[int] = ..., clipped: _Optional[int] = ...) -> None: ...
