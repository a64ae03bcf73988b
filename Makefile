# The README's test command is `make test`: every test, then the race detector over
# the packages where goroutines meet (the daemon, the bench, the gRPC plumbing),
# on the tests that -short keeps (the long closed-loop runs are covered above).
# Packages run one at a time (-p 1): several tests run a real-time loop at 1 kHz,
# and on a 2-core machine another package's tests beside them would be the load
# they measure.
.PHONY: test demo

test:
	go test -p 1 ./...
	go test -p 1 -race -short ./daemon/ ./sim/bench/ ./internal/... ./controller/...

demo:
	go run ./cmd/stillsky demo
