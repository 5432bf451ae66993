"""Counter-based random streams: member m's draws depend only on (seed, m, stream).

Each stream is a splitmix64 generator whose starting state comes from
numpy's SeedSequence([seed, m, stream]); a kernel holds its state in a
one-element uint64 array, so no generator is ever shared between members or threads.
"""
import numpy as np

from baggr.jit import kernel

STREAM_DRAW = 0     # bootstrap counts
STREAM_TREE = 1     # features tried at each node
STREAM_IMPORTANCE = 2  # permutations of the OOB permutation importance


def stream_state(seed: int, member: int, stream: int) -> np.ndarray:
    """The starting state (uint64[1]) of one member's stream."""
    words = np.random.SeedSequence([int(seed), int(member), int(stream)]).generate_state(1, np.uint64)
    return np.asarray(words, dtype=np.uint64)


@kernel
def next_u64(state):
    """splitmix64 (Steele, Lea, Flood 2014): advance the state, return 64 mixed bits."""
    state[0] += np.uint64(0x9E3779B97F4A7C15)
    z = state[0]
    z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
    return z ^ (z >> np.uint64(31))


@kernel
def below(state, n):
    """A uniform integer in [0, n), n >= 1 (Lemire's multiply-shift on the top 32 bits; n < 2**32)."""
    x = next_u64(state) >> np.uint64(32)
    return np.int64((x * np.uint64(n)) >> np.uint64(32))


@kernel
def uniform(state):
    """A uniform float in [0, 1) with 53 random bits."""
    return np.float64(next_u64(state) >> np.uint64(11)) * (1.0 / 9007199254740992.0)
