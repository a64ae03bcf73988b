// Package mvm holds the matrix–vector multiply kernels of the reconstructor:
// y = A·x with A a dense row-major float32 control matrix (actuators ×
// slopes), and the column-range form y += A[:, c0:c1]·x[c0:c1] used to
// multiply a frame chunk by chunk as the camera reads it out.
//
// The contract: every kernel computes the same product as Plain (to float32
// rounding, and to the stored precision with BFloat16); MulVec and MulVecCols
// allocate nothing, do no I/O and read no clocks. The package depends on
// nothing but the standard library, golang.org/x/sys/cpu and, on Linux,
// golang.org/x/sys/unix (mmap and madvise for the stored matrix; its tests also
// use gonum).
//
// # Kernels
//
// Plain (NewPlain) is the portable reference: a row-by-row float32 dot
// product on the caller's matrix. Every fast kernel is tested against it.
//
// New (or NewFast) copies the matrix into its own layout and picks an inner
// loop at run time with golang.org/x/sys/cpu:
//
//   - "avx512": Go assembly, AVX-512F, 16 lanes;
//   - "avx2": Go assembly, AVX2 with FMA, 8 lanes;
//   - "plain": pure Go, the same loop as Plain; the only kernel off amd64 or
//     on a CPU without AVX2 and FMA.
//
// The fastest available is the default (avx512, then avx2, then plain);
// Options.Kernel forces one and New fails if the CPU or build lacks it.
// Available lists the usable ones.
//
// The product is bound by the bytes of A it reads: a control matrix of a
// few thousand slopes is megabytes (850×1600 float32 is 5.4 MB, 3300×6400 is
// 84 MB), beyond a core's L2, so it streams from L3 or memory at every frame
// (the README gives the rates measured on the development machine). So the
// kernels are built to stream A at full speed. The AVX-512 float32 loop takes eight rows per pass
// (one load of x feeds eight FMAs, sixteen accumulators keep the FMA pipes
// busy) and prefetches each row 256 bytes ahead; the AVX2 loop takes four.
// Every stored row starts on a cache line. A float32 row is padded only to a
// whole line (16 columns) and the kernels mask the loads of the last partial
// vector, so they take any column range and read x in place, with no copy
// per product. A bfloat16 row is stored in blocks of 32 columns (see
// packBF16); column ranges off that grid go through a padded copy of x that
// is zero outside the range, and that is why New refuses a matrix with
// non-finite elements (0·Inf would not vanish). Rows not a multiple of 4 end
// in a zero-padded group whose extra results are dropped. On Linux a stored
// matrix of 2 MiB or more gets its own mapping with transparent huge pages
// requested, which cuts the TLB misses of streaming it (see store).
//
// # Reduced precision
//
// Options.Precision = BFloat16 stores A as bfloat16 (round to nearest even),
// halving the bytes read; the kernels widen each element exactly with a shift
// (no BF16 instructions needed) and compute in float32. The stored elements
// carry a relative error of at most 2^-8; the measured relative rms command
// error is about 0.16% on a random matrix and 0.07% on a least-squares
// reconstructor of a 16×16 Fried-geometry system (TestBFloat16CommandError).
//
// # Worker pool: the one goroutine exception in controller/
//
// The controller core starts no goroutines. A Fast multiplier with
// Workers > 1 is the single exception: it starts Workers-1 goroutines in New,
// which live until Close. Each participant owns a few contiguous row
// blocks; the caller publishes the job with an atomic sequence number, every
// participant claims its own blocks and then steals unclaimed ones (so a
// worker the OS has not scheduled delays nothing), and the caller spins until
// an atomic done counter shows every block finished: no channel operation,
// lock or allocation per product. Idle
// workers spin (PAUSE, yielding P and core now and then) for about 1.5 ms,
// longer than a frame at any loop rate of interest, then park on a channel
// until the next product; see pool.go for the protocol. Options.Workers = 0
// picks one thread below 2 MB of stored matrix, else GOMAXPROCS threads.
// A Fast is used by one goroutine at a time.
//
// # Benchmarks
//
//	go test -bench MVM ./controller/mvm/
//	go test -tags openblas -bench . ./controller/mvm/openblasbench/
//
// BenchmarkMVM/<rows>x<cols>/<variant> reports bytes/s of stored matrix for
// plain, each SIMD kernel on 1 and 2 threads, bfloat16 and the automatic
// choice. BenchmarkReadBandwidth is the STREAM-style read yardstick, and
// BenchmarkMVMvsRead alternates the product and a read of the same byte count
// in one run and reports their ratio (mvm/read); BenchmarkMVMChunked does
// the same for a product taken in ten column chunks against the whole
// product (chunked/whole). The openblasbench package
// alternates our product with OpenBLAS cblas_sgemv on the same thread count
// and reports ours/openblas (> 1: ours is faster); it needs cgo and Debian
// libopenblas-dev. On a shared machine quote medians of -count 5 or more.
package mvm
