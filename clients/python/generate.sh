#!/bin/sh
# Regenerates the Python protocol code from the same .proto files as the Go code,
# with Debian's protoc (protobuf-compiler) and gRPC Python plugin
# (protobuf-compiler-grpc). With an argument, writes into that directory instead of
# this one (the staleness test in python_test.go compares the two).
set -eu
here=$(cd "$(dirname "$0")" && pwd)
out=${1:-$here}
protoc -I "$here/../../proto" \
  --python_out="$out" --pyi_out="$out" --grpc_out="$out" \
  --plugin=protoc-gen-grpc="$(command -v grpc_python_plugin)" \
  "$here"/../../proto/stillsky/v1/*.proto
