"""fftgauge.harness.shutdown: SIGTERM and SIGHUP become an exception like Ctrl-C's, carrying
the signal, and the previous handlers come back. Exit codes are the shell's convention for a
process ended by a signal, 128 + its number (POSIX sh, "Exit Status"; signal numbers from the
platform's signal module: SIGHUP 1, SIGINT 2, SIGTERM 15 on Linux)."""

from __future__ import annotations

import signal

import pytest

from fftgauge.harness.shutdown import StopRequested, exit_code_for, stop_on_signals, stop_reason


@pytest.mark.parametrize("name, code", [("SIGTERM", 143), ("SIGHUP", 129), ("SIGINT", 130)])
def test_a_signal_inside_the_block_raises_stop_requested_with_its_exit_code(name, code):
    number = getattr(signal, name)
    with pytest.raises(StopRequested) as caught:
        with stop_on_signals():
            signal.raise_signal(number)
    stop = caught.value
    assert isinstance(stop, KeyboardInterrupt)  # Ctrl-C handling applies to it
    assert (stop.signal_number, stop.signal_name, stop.exit_code) == (number, name, code)
    assert stop_reason(stop) == (name, code) and exit_code_for(number) == code


def test_previous_handlers_come_back_and_ignored_signals_stay_ignored():
    seen = []
    previous_term = signal.signal(signal.SIGTERM, lambda signum, frame: seen.append(signum))
    previous_hup = signal.signal(signal.SIGHUP, signal.SIG_IGN)
    try:
        before = signal.getsignal(signal.SIGTERM)
        with stop_on_signals():
            assert signal.getsignal(signal.SIGTERM) is not before
            assert signal.getsignal(signal.SIGHUP) is signal.SIG_IGN
            signal.raise_signal(signal.SIGHUP)  # ignored: nothing raised
        assert signal.getsignal(signal.SIGTERM) is before
        signal.raise_signal(signal.SIGTERM)
        assert seen == [signal.SIGTERM]
    finally:
        signal.signal(signal.SIGTERM, previous_term)
        signal.signal(signal.SIGHUP, previous_hup)


def test_a_plain_keyboard_interrupt_reads_as_sigint():
    assert stop_reason(KeyboardInterrupt()) == ("SIGINT", 130)


def test_handlers_are_restored_when_the_block_raises():
    before = signal.getsignal(signal.SIGTERM)
    with pytest.raises(ValueError):
        with stop_on_signals():
            raise ValueError("boom")
    assert signal.getsignal(signal.SIGTERM) is before
