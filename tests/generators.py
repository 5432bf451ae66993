"""Published synthetic problems used as outside references (each with its source)."""
import numpy as np


def twonorm(n, seed, p=20):
    """Breiman (1996), Bias, variance and arcing classifiers: two classes N(+a 1, I) and N(-a 1, I) in p=20
    dimensions, a = 2 / sqrt(20); the Bayes error is Phi(-2) = 2.275%."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 2, n)
    a = 2 / np.sqrt(p)
    X = rng.normal(size=(n, p)) + np.where(y[:, None] == 1, a, -a)
    return X, y


def friedman1(n, seed, p=10, noise=1.0):
    """Friedman (1991), Multivariate adaptive regression splines: y = 10 sin(pi x1 x2) + 20 (x3 - 0.5)^2
    + 10 x4 + 5 x5 + N(0, 1), x ~ U[0, 1]^10 (x6..x10 are noise); the MSE floor is the noise variance 1."""
    rng = np.random.default_rng(seed)
    X = rng.random((n, p))
    y = (10 * np.sin(np.pi * X[:, 0] * X[:, 1]) + 20 * (X[:, 2] - 0.5) ** 2 + 10 * X[:, 3] + 5 * X[:, 4]
         + noise * rng.normal(size=n))
    return X, y


def waveform(n, seed):
    """Breiman, Friedman, Olshen & Stone (1984), CART, sec. 2.6.2: 21 features, 3 classes, each a random
    convex mix of two of three triangular waves plus N(0, 1) noise; Bayes error about 13-14%."""
    rng = np.random.default_rng(seed)
    i = np.arange(1, 22)
    h1 = np.maximum(6 - np.abs(i - 11), 0)
    h2 = np.maximum(6 - np.abs(i - 15), 0)  # h1 shifted right by 4
    h3 = np.maximum(6 - np.abs(i - 7), 0)   # h1 shifted left by 4
    pairs = [(h1, h2), (h1, h3), (h2, h3)]
    y = rng.integers(0, 3, n)
    u = rng.random(n)[:, None]
    base_a = np.stack([pairs[k][0] for k in y])
    base_b = np.stack([pairs[k][1] for k in y])
    X = u * base_a + (1 - u) * base_b + rng.normal(size=(n, 21))
    return X, y


def noise_classes(n, seed, p=5):
    """Balanced two-class pure noise: the true error of any rule is 0.5 (fact of the trade)."""
    rng = np.random.default_rng(seed)
    y = np.repeat([0, 1], n // 2)
    rng.shuffle(y)
    return rng.normal(size=(n, p)), y


def noisy_halves(n, seed, p=6, redrawn=0.4):
    """Two classes "yes"/"no" split by x0 + x1 > 0, with a share `redrawn` of the labels drawn again
    at random (test data for long, hard runs; no source): columns f0..f{p-1} and "label"."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)).round(3)
    y = (X[:, 0] + X[:, 1] > 0).astype(int)
    flip = rng.random(n) < redrawn
    y[flip] = rng.integers(0, 2, flip.sum())
    return {**{f"f{j}": X[:, j] for j in range(p)}, "label": np.where(y == 1, "yes", "no")}
