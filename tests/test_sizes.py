"""The --sizes grammar and named sets (contracts: "Sizes")."""

import pytest

from fftgauge.harness.errors import UsageError
from fftgauge.harness.sizes import NAMED_SETS, is_prime, parse_sizes


def test_every_item_form():
    assert parse_sizes("7") == [7]
    assert parse_sizes("3..6") == [3, 4, 5, 6]
    assert parse_sizes("2^3..2^5") == [8, 16, 32]
    assert parse_sizes("2^10") == [1024]
    assert parse_sizes(" 5, 1..2 ,5") == [1, 2, 5]


@pytest.mark.parametrize("bad", ["0", "-4", "2^x", "5..3", "", " ", "1,,2", "@nope", "1.5", "2^3..2^1", "abc"])
def test_bad_items_are_usage_errors_naming_the_item(bad):
    with pytest.raises(UsageError) as info:
        parse_sizes(bad)
    msg = str(info.value)
    assert "\n" not in msg
    item = bad.strip()
    if item and "," not in item:
        assert repr(item) in msg


def test_default_set_covers_what_the_battery_needs():
    sizes = set(parse_sizes("@default"))
    assert set(range(1, 65)) <= sizes
    assert {2**k for k in range(17)} <= sizes
    primes = [n for n in sizes if is_prime(n)]
    assert max(primes) > 9000 and len(primes) > 20
    assert any(n % 2 and not is_prime(n) and n > 100 for n in sizes)  # odd composites
    smooth = [n for n in sizes if n > 64 and n & (n - 1) and all(p in (2, 3, 5, 7) for p in _factors(n))]
    assert len(smooth) >= 10


def test_deep_set_reaches_two_to_twenty_and_large_primes():
    sizes = set(parse_sizes("@deep"))
    assert 2**20 in sizes and set(parse_sizes("@default")) <= sizes
    assert any(is_prime(n) and n > 65000 for n in sizes)


def test_named_sets_are_sorted_unique_and_documented():
    for name, (text, _) in NAMED_SETS.items():
        sizes = parse_sizes("@" + name)
        assert sizes == sorted(set(sizes)) and text


def test_is_prime_against_a_sieve():
    # Independent check: primes below 200 by the definition (no divisor in 2..n-1).
    expected = [n for n in range(200) if n > 1 and all(n % d for d in range(2, n))]
    assert [n for n in range(200) if is_prime(n)] == expected


def _factors(n):
    out, f = [], 2
    while f * f <= n:
        while n % f == 0:
            out.append(f)
            n //= f
        f += 1
    if n > 1:
        out.append(n)
    return out
