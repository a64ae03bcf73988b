// Package mvm holds the matrix–vector multiply kernels of the reconstructor:
// y = A·x with A a dense float32 control matrix. The Plain kernel is the portable
// reference; faster kernels must agree with it.
//
// It depends on nothing but the standard library (and golang.org/x/sys/cpu for
// kernel selection); it does no I/O, reads no clocks and never allocates in MulVec.
package mvm
