// Package openblasbench runs stillsky's MVM and OpenBLAS cblas_sgemv side by
// side in one process and reports their ratio, so the comparison survives a
// noisy, shared machine. It exists only for that benchmark: it is built with
// the build tag openblas, uses cgo, and nothing in the product imports it.
//
// Needs Debian libopenblas-dev (and a C compiler). Run:
//
//	go test -tags openblas -bench . -count 5 ./controller/mvm/openblasbench/
package openblasbench
