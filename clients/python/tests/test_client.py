"""Tests of the Python client against a real bench and loop daemon.

Each test class starts `stillsky sim` and `stillsky loop` on unix sockets in a
temporary directory. The binary is $STILLSKY_BIN, or else built from this
repository with `go build`. Run from clients/python:

    /usr/bin/python3 -m unittest discover -s tests -t .
"""

import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
import unittest

import grpc
import numpy as np

import stillsky

REPO = os.path.abspath(os.path.join(os.path.dirname(__file__), "..", "..", ".."))

_built = None


def binary():
    """The stillsky binary: $STILLSKY_BIN, or one built once for this run."""
    global _built
    if os.environ.get("STILLSKY_BIN"):
        return os.environ["STILLSKY_BIN"]
    if _built is None:
        d = tempfile.mkdtemp(prefix="stillsky-bin-")
        path = os.path.join(d, "stillsky")
        subprocess.run(["go", "build", "-o", path, "./cmd/stillsky"], cwd=REPO, check=True)
        _built = path
    return _built


class Rig:
    """A bench and a loop daemon as two processes talking over unix sockets."""

    def __init__(self, sim_args=(), loop_args=()):
        self.dir = tempfile.mkdtemp(prefix="stillsky-py-")
        sock = lambda name: "unix:" + os.path.join(self.dir, name)
        self.address = sock("control.sock")
        self.procs = []
        self.logs = []
        self._start("sim", ["--scenario", "small", "--camera", sock("camera.sock"), "--mirror", sock("mirror.sock"),
                            "--metrics", "", "--log-level", "warn", *sim_args])
        self._start("loop", ["--camera", sock("camera.sock"), "--mirror", sock("mirror.sock"), "--listen", self.address,
                             "--metrics", "-", "--log-level", "warn", *loop_args])

    def _start(self, verb, args):
        log = open(os.path.join(self.dir, verb + ".log"), "wb")
        self.logs.append(log)
        self.procs.append(subprocess.Popen([binary(), verb, *args], stdout=log, stderr=subprocess.STDOUT))

    def wait_connected(self, client, timeout=30):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            for p in self.procs:
                if p.poll() is not None:
                    raise RuntimeError(f"{p.args[1]} exited with {p.returncode}: {self.log_text()}")
            try:
                s = client.status()
                if s.camera_connected and s.mirror_connected and s.frames > 0:
                    return s
            except stillsky.Error:
                pass
            time.sleep(0.05)
        raise RuntimeError("the loop did not connect to the bench within %d s: %s" % (timeout, self.log_text()))

    def log_text(self):
        out = []
        for log in self.logs:
            log.flush()
            with open(log.name, "rb") as f:
                out.append(f.read().decode(errors="replace"))
        return "\n".join(out)

    def stop(self):
        for p in reversed(self.procs):
            p.send_signal(signal.SIGTERM)
            try:
                p.wait(timeout=10)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
        for log in self.logs:
            log.close()
        shutil.rmtree(self.dir, ignore_errors=True)


def wait_state(client, state, timeout=20):
    """Waits until the loop reports state: the daemon applies a state change at
    its next frame, and on a busy machine the next frame may come late."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        s = client.status()
        if s.state == state:
            return s
        time.sleep(0.02)
    raise AssertionError(f"the loop is {stillsky.state_name(s.state)}, not {stillsky.state_name(state)}, after {timeout} s")


class WithoutReconstructor(unittest.TestCase):
    """A fresh daemon refuses what needs a reconstructor, and bad values, with
    the gRPC codes its .proto documents."""

    @classmethod
    def setUpClass(cls):
        cls.rig = Rig(sim_args=["--lockstep"])
        cls.client = stillsky.Client(cls.rig.address)
        cls.rig.wait_connected(cls.client)

    @classmethod
    def tearDownClass(cls):
        cls.client.close()
        cls.rig.stop()

    def assertCode(self, code, fn, *args):
        with self.assertRaises(stillsky.Error) as cm:
            fn(*args)
        self.assertEqual(cm.exception.code, code, str(cm.exception))
        self.assertTrue(cm.exception.message, "the daemon's message is kept")
        self.assertTrue(str(cm.exception).startswith(code.name.lower() + ": "))

    def test_refusals(self):
        s = self.client.status()
        self.assertEqual(s.state, stillsky.OPEN)
        self.assertEqual(stillsky.state_name(s.state), "open")
        self.assertFalse(s.HasField("reconstructor"))
        self.assertCode(grpc.StatusCode.FAILED_PRECONDITION, self.client.close_loop)
        self.assertCode(grpc.StatusCode.FAILED_PRECONDITION, self.client.hold_loop)
        self.assertEqual(s.supervisor_state, "", "no supervisor without --autonomous")
        self.assertCode(grpc.StatusCode.FAILED_PRECONDITION, self.client.resume_autonomous)
        self.assertCode(grpc.StatusCode.FAILED_PRECONDITION, self.client.save_reconstructor)
        self.assertCode(grpc.StatusCode.FAILED_PRECONDITION, self.client.set_modal_gains, [1.0])
        # The small scenario's camera streams slopes: no pixel calibration.
        self.assertCode(grpc.StatusCode.FAILED_PRECONDITION, self.client.capture_pixel_calibration, "dark")
        with self.assertRaises(ValueError):
            self.client.capture_pixel_calibration("bias")
        self.assertCode(grpc.StatusCode.INVALID_ARGUMENT, self.client.set_gain, 2.5)
        self.assertCode(grpc.StatusCode.INVALID_ARGUMENT, self.client.set_gain, float("nan"))
        self.assertCode(grpc.StatusCode.INVALID_ARGUMENT, self.client.set_leak, 1.0)
        self.assertCode(grpc.StatusCode.INVALID_ARGUMENT, self.client.telemetry, 1, 0)
        self.assertCode(grpc.StatusCode.INVALID_ARGUMENT, self.client.load_reconstructor, b"SIMPLE  =  not FITS" * 200)
        after = self.client.status()
        self.assertEqual((after.state, after.gain, after.leak), (s.state, s.gain, s.leak), "refused calls change nothing")

    def test_unreachable_daemon(self):
        with stillsky.Client("unix:" + os.path.join(self.rig.dir, "nobody.sock"), timeout=2) as c:
            with self.assertRaises(stillsky.Error) as cm:
                c.status()
        self.assertIn(cm.exception.code, (grpc.StatusCode.UNAVAILABLE, grpc.StatusCode.DEADLINE_EXCEEDED))

    def test_token_needs_tls(self):
        with self.assertRaisesRegex(ValueError, "needs TLS"):
            stillsky.Client(self.rig.address, token_file="/dev/null")


class ClosedLoop(unittest.TestCase):
    """Calibrate, close the loop and read telemetry from a free-running bench (at
    normal priority: at idle priority a busy machine starves it of frames)."""

    @classmethod
    def setUpClass(cls):
        cls.rig = Rig(sim_args=["--idle-priority=false"])
        cls.client = stillsky.Client(cls.rig.address)
        cls.rig.wait_connected(cls.client)
        cls.progress = []
        cls.info = cls.client.calibrate(progress=lambda *p: cls.progress.append(p), timeout=120)

    @classmethod
    def tearDownClass(cls):
        cls.client.close()
        cls.rig.stop()

    def setUp(self):
        self.client.open_loop()
        wait_state(self.client, stillsky.OPEN)
        self.client.set_modal_gains(np.ones(self.info.modes_kept))

    def test_calibration_progress(self):
        phases = [p[0] for p in self.progress]
        self.assertEqual(phases[-1], "done")
        self.assertIn("pokes", phases)
        done = [p[1] for p in self.progress if p[0] == "pokes"]
        self.assertEqual(done, sorted(done), "progress only moves forward")
        self.assertEqual(self.progress[-1][1], self.progress[-1][2], "done == total at the end")
        s = self.client.status()
        self.assertEqual((self.info.slope_count, self.info.actuator_count), (s.slope_count, s.actuator_count))

    def test_reconstructor_file(self):
        """The saved file is FITS that astropy reads (FITS Standard 4.0): the control
        matrix is actuators × slopes, and SINGVAL holds the singular values that
        GetStatus reports."""
        try:
            from astropy.io import fits
        except ImportError:
            if os.environ.get("CI") == "true":
                raise
            self.skipTest("astropy not installed (Debian package python3-astropy)")
        path = os.path.join(self.rig.dir, "reconstructor.fits")
        data = self.client.save_reconstructor(path)
        with open(path, "rb") as f:
            self.assertEqual(f.read(), data)
        self.assertEqual(len(data) % 2880, 0, "FITS files are whole 2880-byte records")
        with fits.open(path) as hdus:
            r = hdus[0].data
            self.assertEqual(r.shape, (self.info.actuator_count, self.info.slope_count))
            np.testing.assert_allclose(hdus["SINGVAL"].data, self.info.singular_values, rtol=1e-12)
        again = self.client.load_reconstructor(path)
        self.assertEqual(again.created_unix, self.info.created_unix)
        self.assertEqual(again.modes_kept, self.info.modes_kept)

    def test_telemetry_follows_the_leaky_integrator(self):
        """Consecutive closed-loop samples obey c_k = (1 − ℓ) c_{k−1} + g R s_k
        (the leaky integrator; R from the saved reconstructor, computed here in
        numpy), with residual_slope_rms_rad = rms(s_k)."""
        try:
            from astropy.io import fits
        except ImportError:
            if os.environ.get("CI") == "true":
                raise
            self.skipTest("astropy not installed (Debian package python3-astropy)")
        path = os.path.join(self.rig.dir, "control-matrix.fits")
        self.client.save_reconstructor(path)
        with fits.open(path) as hdus:
            r = hdus[0].data.astype(np.float64)
        gain, leak = 0.3, 0.02
        self.assertAlmostEqual(self.client.set_gain(gain).gain, gain)
        self.assertAlmostEqual(self.client.set_leak(leak).leak, leak)
        self.client.close_loop()
        wait_state(self.client, stillsky.CLOSED)
        tel = self.client.telemetry(400, timeout=60)
        self.assertEqual(tel.slopes.shape, (400, self.info.slope_count))
        self.assertEqual(tel.commands.shape, (400, self.info.actuator_count))
        self.assertEqual(tel.slopes.dtype, np.float32)
        self.assertTrue(np.all(np.diff(tel.frame_number.astype(np.int64)) > 0), "samples in frame order")
        self.assertTrue(np.all(np.diff(tel.received_unix_s) >= 0))
        np.testing.assert_allclose(tel.residual_slope_rms_rad, np.sqrt(np.mean(tel.slopes.astype(np.float64) ** 2, axis=1)),
                                   rtol=1e-5)
        closed = tel.state == stillsky.CLOSED
        pairs = np.flatnonzero((np.diff(tel.frame_number.astype(np.int64)) == 1) & closed[1:] & closed[:-1]
                               & (tel.saturated_actuators[1:] == 0)) + 1
        self.assertGreater(len(pairs), 20, "enough consecutive closed-loop frames to check")
        s, c = tel.slopes.astype(np.float64), tel.commands.astype(np.float64)
        want = (1 - leak) * c[pairs - 1] + gain * s[pairs] @ r.T
        scale = np.abs(c[pairs]).max()
        np.testing.assert_allclose(c[pairs], want, rtol=0, atol=1e-5 * scale)
        self.assertGreater(np.mean(tel.strehl_estimate[closed]), 0.3)

    def test_samples_decimated(self):
        frames = []
        for s in self.client.samples(decimation=5):
            frames.append(s.frame_number)
            if len(frames) == 6:
                break
        # The daemon sends at most one sample per block of 5 frame numbers.
        blocks = np.diff(np.asarray(frames, dtype=np.int64) // 5)
        self.assertTrue(np.all(blocks >= 1), f"one sample per 5 frames: {frames}")

    def test_hold_and_modal_gains(self):
        self.client.close_loop()
        wait_state(self.client, stillsky.CLOSED)
        self.client.hold_loop()
        wait_state(self.client, stillsky.HOLD)
        tel = self.client.telemetry(20, timeout=30)
        hold = tel.state == stillsky.HOLD
        self.assertTrue(hold.any())
        np.testing.assert_array_equal(tel.commands[hold], np.repeat(tel.commands[hold][:1], hold.sum(), axis=0),
                                      "the mirror keeps its last command on hold")
        self.client.close_loop()
        wait_state(self.client, stillsky.CLOSED)
        # Zero gain on every mode: the control matrix is zero, so the leak alone
        # decays the command, c_k = (1 − ℓ) c_{k−1}.
        self.client.set_modal_gains(np.zeros(self.info.modes_kept))
        leak = self.client.status().leak
        tel = self.client.telemetry(200, timeout=30)
        c = tel.commands.astype(np.float64)
        closed = tel.state == stillsky.CLOSED
        k = np.flatnonzero((np.diff(tel.frame_number.astype(np.int64)) == 1) & closed[1:] & closed[:-1])[-20:] + 1
        self.assertGreaterEqual(len(k), 10, "enough consecutive closed-loop frames to check")
        np.testing.assert_allclose(c[k], (1 - leak) * c[k - 1], rtol=0, atol=1e-6 * max(np.abs(c).max(), 1e-12))
        with self.assertRaises(stillsky.Error) as cm:
            self.client.set_modal_gains(np.ones(self.info.modes_kept + 1))
        self.assertEqual(cm.exception.code, grpc.StatusCode.INVALID_ARGUMENT)

class Lockstep(unittest.TestCase):
    """Recording and the modal gain optimiser on a lockstep bench, where no frame
    is lost or late however busy the machine."""

    @classmethod
    def setUpClass(cls):
        cls.rig = Rig(sim_args=["--lockstep"])
        cls.client = stillsky.Client(cls.rig.address)
        cls.rig.wait_connected(cls.client)
        cls.info = cls.client.calibrate(timeout=120)

    @classmethod
    def tearDownClass(cls):
        cls.client.close()
        cls.rig.stop()

    def test_recording(self):
        """A recording has every frame in order, timestamps in the order the daemon
        takes them (received, computed, sent on one CLOCK_MONOTONIC), the
        reconstructor file SaveReconstructor gives, and commands that follow the
        leaky integrator on every pair of consecutive closed-loop frames."""
        gain = 0.35
        self.client.set_gain(gain)
        leak = self.client.status().leak
        self.client.close_loop()
        wait_state(self.client, stillsky.CLOSED)
        rec = self.client.record(300, timeout=60)
        self.assertEqual(len(rec), 300)
        self.assertEqual(rec.slopes.shape, (300, self.info.slope_count))
        self.assertEqual(rec.commands.shape, (300, self.info.actuator_count))
        self.assertAlmostEqual(rec.header.gain, gain)
        self.assertEqual(rec.reconstructor_file, self.client.save_reconstructor())
        self.assertTrue(np.all(np.diff(rec.frame_number.astype(np.int64)) >= 1))
        self.assertTrue(np.all(rec.received_ns <= rec.computed_ns) and np.all(rec.computed_ns <= rec.sent_ns))
        try:
            from astropy.io import fits
        except ImportError:
            if os.environ.get("CI") == "true":
                raise
            self.skipTest("astropy not installed (Debian package python3-astropy)")
        import io
        with fits.open(io.BytesIO(rec.reconstructor_file)) as hdus:
            r = hdus[0].data.astype(np.float64)
        closed = rec.state == stillsky.CLOSED
        k = np.flatnonzero((np.diff(rec.frame_number.astype(np.int64)) == 1) & closed[1:] & closed[:-1]
                           & (rec.saturated_actuators[1:] == 0)) + 1
        self.assertGreater(len(k), 250)
        c, s = rec.commands.astype(np.float64), rec.slopes.astype(np.float64)
        np.testing.assert_allclose(c[k], (1 - leak) * c[k - 1] + gain * s[k] @ r.T, rtol=0,
                                   atol=1e-5 * np.abs(c[k]).max())

    def test_modal_gains_dry_run(self):
        self.client.close_loop()
        wait_state(self.client, stillsky.CLOSED)
        r = self.client.optimise_modal_gains(frames=512, dry_run=True, timeout=60)
        self.assertEqual(len(r.gains), self.info.modes_kept)
        self.assertTrue(np.all(np.isfinite(r.gains)))
        self.assertTrue(np.isfinite(r.predicted_residual_before) and np.isfinite(r.predicted_residual_after))
        with self.assertRaises(stillsky.Error) as cm:
            self.client.optimise_modal_gains(frames=10)
        self.assertEqual(cm.exception.code, grpc.StatusCode.INVALID_ARGUMENT)



class Example(unittest.TestCase):
    """The example script of the README runs to its end against a lockstep bench."""

    def test_example(self):
        rig = Rig(sim_args=["--lockstep"])
        try:
            with stillsky.Client(rig.address) as c:
                rig.wait_connected(c)
            here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
            env = dict(os.environ, PYTHONPATH=here)
            out = subprocess.run([sys.executable, os.path.join(here, "example.py"), rig.address], env=env,
                                 capture_output=True, text=True, timeout=120)
            self.assertEqual(out.returncode, 0, out.stderr)
            self.assertIn("reconstructor: svd", out.stdout)
            self.assertIn("refused: invalid_argument: ", out.stdout)
            with stillsky.Client(rig.address) as c:
                self.assertEqual(c.status().state, stillsky.OPEN)
        finally:
            rig.stop()


def _openssl(*args, cwd):
    subprocess.run(["openssl", *args], cwd=cwd, check=True, capture_output=True)


class Security(unittest.TestCase):
    """TLS and a bearer token, as `stillsky ctl` uses them: state-changing calls need
    the token (UNAUTHENTICATED without, PERMISSION_DENIED with a wrong one), status
    does not."""

    @classmethod
    def setUpClass(cls):
        if shutil.which("openssl") is None:
            if os.environ.get("CI") == "true":
                raise RuntimeError("openssl not found (Debian package openssl)")
            raise unittest.SkipTest("openssl not found (Debian package openssl)")
        cls.certs = tempfile.mkdtemp(prefix="stillsky-tls-")
        d = cls.certs
        _openssl("req", "-x509", "-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:P-256", "-nodes", "-days", "1",
                 "-subj", "/CN=test CA", "-keyout", "ca.key", "-out", "ca.pem", cwd=d)
        _openssl("req", "-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:P-256", "-nodes", "-subj", "/CN=loop",
                 "-keyout", "loop.key", "-out", "loop.csr", cwd=d)
        with open(os.path.join(d, "ext.cnf"), "w") as f:
            f.write("subjectAltName=DNS:localhost,IP:127.0.0.1\n")
        _openssl("x509", "-req", "-in", "loop.csr", "-CA", "ca.pem", "-CAkey", "ca.key", "-CAcreateserial", "-days", "1",
                 "-extfile", "ext.cnf", "-out", "loop.pem", cwd=d)
        for name, token in (("token", "a-token-of-32-characters-or-so-x"), ("wrong", "another-token-of-enough-length")):
            with open(os.path.join(d, name), "w") as f:
                f.write(token + "\n")
        p = lambda n: os.path.join(d, n)
        cls.rig = Rig(sim_args=["--lockstep"],
                      loop_args=["--tls-cert", p("loop.pem"), "--tls-key", p("loop.key"), "--token-file", p("token")])
        cls.reader = stillsky.Client(cls.rig.address, tls_ca=p("ca.pem"), server_name="localhost")
        cls.rig.wait_connected(cls.reader)

    def path(self, name):
        return os.path.join(self.certs, name)

    @classmethod
    def tearDownClass(cls):
        cls.reader.close()
        cls.rig.stop()
        shutil.rmtree(cls.certs, ignore_errors=True)

    def test_token(self):
        with self.assertRaises(stillsky.Error) as cm:
            self.reader.set_gain(0.25)
        self.assertEqual(cm.exception.code, grpc.StatusCode.UNAUTHENTICATED)
        with stillsky.Client(self.rig.address, tls_ca=self.path("ca.pem"), token_file=self.path("wrong"),
                             server_name="localhost") as c:
            with self.assertRaises(stillsky.Error) as cm:
                c.set_gain(0.25)
            self.assertEqual(cm.exception.code, grpc.StatusCode.PERMISSION_DENIED)
        self.assertNotEqual(self.reader.status().gain, 0.25)
        with stillsky.Client(self.rig.address, tls_ca=self.path("ca.pem"), token_file=self.path("token"),
                             server_name="localhost") as c:
            self.assertEqual(c.set_gain(0.25).gain, 0.25)
        self.assertEqual(self.reader.status().gain, 0.25)
        self.assertEqual(len(self.reader.telemetry(3, timeout=30)), 3, "telemetry needs no token")

    def test_plain_client_refused(self):
        with stillsky.Client(self.rig.address, timeout=5) as c:
            with self.assertRaises(stillsky.Error) as cm:
                c.status()
        self.assertEqual(cm.exception.code, grpc.StatusCode.UNAVAILABLE)


if __name__ == "__main__":
    unittest.main()
