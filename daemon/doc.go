// Package daemon is the loop process around the control core: it connects to the
// camera and mirror over gRPC, learns their geometry through Describe, runs the
// real-time goroutine (receive → controller.Loop.Step → send; on an OS thread of
// its own when pinned or under SCHED_FIFO, see Realtime), serves the Control API and exports Prometheus metrics from its own
// registry. It holds the loop state machine, calibration driving, persistence of
// the committed reconstructor and the safety interlocks.
//
// It puts no control math here: every formula lives in package controller.
package daemon
