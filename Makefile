# The README's test command is `make test`: every test, then the race detector over
# the packages where goroutines meet (the daemon, the bench, the rig that runs
# both in one process, the gRPC plumbing),
# on the tests that -short keeps (the long closed-loop runs are covered above).
# Packages run one at a time (-p 1): several tests run a real-time loop at 1 kHz,
# and on a 2-core machine another package's tests beside them would be the load
# they measure.
.PHONY: test demo verify

test:
	go test -p 1 ./...
	go test -p 1 -race -short ./daemon/ ./sim/bench/ ./rig/ ./internal/... ./controller/...

demo:
	go run ./cmd/stillsky demo

# The lint gate, run by .ci/run before the tests: formatting, go vet, staticcheck
# (the version pinned here, fetched through the Go module proxy; configured in
# staticcheck.conf) and a go.mod/go.sum that go mod tidy would leave as they are.
STATICCHECK := honnef.co/go/tools/cmd/staticcheck@v0.8.2

verify:
	@unformatted=$$(gofmt -l .); if [ -n "$$unformatted" ]; then echo "gofmt -l: these files are not formatted:"; echo "$$unformatted"; exit 1; fi
	go vet ./...
	go run $(STATICCHECK) ./...
	go mod tidy -diff
