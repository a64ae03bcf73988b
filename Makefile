# The README's test command is `make test`: every test, then the race detector over
# the packages where goroutines meet (the daemon, the bench, the gRPC plumbing),
# on the tests that -short keeps (the long closed-loop runs are covered above).
.PHONY: test demo

test:
	go test ./...
	go test -race -short ./daemon/ ./sim/bench/ ./internal/... ./controller/...

demo:
	go run ./cmd/stillsky demo
