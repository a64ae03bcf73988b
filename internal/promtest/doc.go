// Package promtest runs a real Prometheus server (the Debian prometheus binary)
// for tests: it writes a configuration that scrapes the given targets every second
// and evaluates the given rule files every second, starts Prometheus on a free
// loopback port with its own temporary storage, and queries it through its HTTP
// API.
//
// It is for tests only and must not be imported by the daemon, the bench or the
// command.
package promtest
