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


def threenorm(n, seed, p=20):
    """Breiman (1996), Bias, variance and arcing classifiers: class 0 drawn with equal probability from
    N(a 1, I) and N(-a 1, I), class 1 from N((a, -a, a, -a, ...), I), p=20, a = 2 / sqrt(20); the
    Bayes error is about 10.5%."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 2, n)
    a = 2 / np.sqrt(p)
    alt = np.where(np.arange(p) % 2 == 0, a, -a)
    sign = np.where(rng.random(n) < 0.5, 1.0, -1.0)
    mean = np.where(y[:, None] == 0, sign[:, None] * a, alt)
    return rng.normal(size=(n, p)) + mean, y


def twonorm_p1(X):
    """P(class 1 | x) for twonorm: the log odds of the two unit normals is 2 a sum(x) (Bayes' rule)."""
    a = 2 / np.sqrt(X.shape[1])
    return 1 / (1 + np.exp(-2 * a * X.sum(axis=1)))


def threenorm_p1(X):
    """P(class 1 | x) for threenorm by Bayes' rule: the densities are proportional to cosh(a sum(x)) and
    exp(alt . x) (the means have equal norms), equal priors."""
    p = X.shape[1]
    a = 2 / np.sqrt(p)
    alt = np.where(np.arange(p) % 2 == 0, a, -a)
    s, t = a * X.sum(axis=1), X @ alt
    # log cosh(s) = |s| + log1p(exp(-2|s|)) - log 2
    log_f0 = np.abs(s) + np.log1p(np.exp(-2 * np.abs(s))) - np.log(2)
    return 1 / (1 + np.exp(log_f0 - t))


def friedman1_mean(X):
    """The noise-free part of Friedman #1 (its conditional mean)."""
    return (10 * np.sin(np.pi * X[:, 0] * X[:, 1]) + 20 * (X[:, 2] - 0.5) ** 2 + 10 * X[:, 3] + 5 * X[:, 4])


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
