// Package proto holds the wire protocol of stillsky: the .proto files under
// stillsky/v1 and the Go generated beside them. It holds no hand-written logic.
//
// Regenerate with `go generate ./proto/...`; the tool versions are pinned here and
// in buf.gen.yaml, and fetched from the Go module proxy.
package proto

//go:generate go run github.com/bufbuild/buf/cmd/buf@v1.75.0 lint
//go:generate go run github.com/bufbuild/buf/cmd/buf@v1.75.0 generate
