"""Unconditional Gaussian random fields on a raster lattice by circulant embedding.

The latent field (covariance structures, no nugget) on an ``n_rows x n_cols``
lattice of square cells is embedded in a torus of ``m_rows x m_cols`` cells. The
covariance between two lattice cells depends only on their offset, so on the
torus the covariance matrix is block circulant with circulant blocks and is
diagonalised by the two-dimensional discrete Fourier transform (Wood & Chan 1994,
*J. Comput. Graph. Stat.* 3(4), 409-432; Dietrich & Newsam 1997, *SIAM J. Sci.
Comput.* 18(4), 1088-1107):

- base ``c[i, j] = C(dx = j~ p, dy = -i~ p)`` with signed torus offsets
  ``i~ = i`` for ``i <= m / 2`` and ``i - m`` above (rows count downwards, so a row
  offset of +1 is a northing offset of ``-p``); the anisotropic structures are
  evaluated at these offsets, so any azimuth and ratio is embedded exactly;
- eigenvalues ``lambda = FFT2(c)`` (real, because ``c[-i, -j] = c[i, j]``);
- with ``W = xi_1 + i xi_2`` of independent standard normals,
  ``Y = FFT2(sqrt(lambda / M) W)``, ``M = m_rows m_cols``, has real and imaginary
  parts that are two independent fields with covariance ``C`` on the torus; the
  top-left ``n_rows x n_cols`` block of each has exactly the covariance of the
  lattice (Dietrich & Newsam 1997, section 2).

Padded sizes are odd, so the signed offsets are symmetric and no Nyquist row or
column needs special treatment for anisotropic models. The embedding starts at the
smallest size that reproduces the lattice covariance exactly: ``2 n - 1`` per axis,
or ``n + s`` when every structure has compact support (spherical) reaching ``s``
cells along that axis, because an offset that wraps around the torus then falls
where the covariance is zero both ways. It is enlarged while some eigenvalue is
negative; every enlargement is noted in ``notes`` (information: the result is exact).
Should no embedding within
the size limit be non-negative, a small lattice falls back to a Cholesky factor of
its exact covariance, and a large one clips the negative eigenvalues to zero and
states the share of variance lost (the approximate method of Wood & Chan 1994,
section 3).

Why the FFT: a dense Cholesky factor of a 1000 x 1000 lattice (10^6 cells) needs
about 10^18 / 3 flops and 8 TB of memory (10^12 doubles); circulant embedding needs
a few FFTs of a 2000 x 2000 array per pair of realisations.
"""
from __future__ import annotations

import math

import numpy as np
from scipy import fft, linalg

from ..errors import FieldcastError
from ..model.covariance import CovarianceModel

MAX_PADDED_CELLS = 1 << 24
"""Largest torus (cells) tried before giving up on an exact embedding (~270 MB per complex array)."""

CHOLESKY_MAX_CELLS = 4096
"""Lattices up to this many cells fall back to a Cholesky factor when no embedding works."""

NEGATIVE_TOLERANCE = 1e-9
"""Negative eigenvalues down to this fraction of the largest are rounding noise, set to zero."""

ENLARGEMENT = 1.5
"""Factor by which each padded side grows after an embedding with negative eigenvalues."""

COMPACT_FAMILIES = ("spherical",)
"""Families whose correlation is exactly zero beyond the range (r >= 1)."""

_FFT_PRIMES = (3, 5, 7, 11)


def odd_fast_length(target: int) -> int:
    """Smallest odd number ``>= target`` whose prime factors are all in 3, 5, 7, 11 (fast FFT sizes)."""
    candidate = max(1, int(target))
    if candidate % 2 == 0:
        candidate += 1
    while True:
        rest = candidate
        for prime in _FFT_PRIMES:
            while rest % prime == 0:
                rest //= prime
        if rest == 1:
            return candidate
        candidate += 2


def lattice_offsets(padded: int, pixel_size: float) -> np.ndarray:
    """Signed torus offsets ``j~ p`` of a padded axis of odd length (CRS units)."""
    index = np.arange(padded)
    return np.where(index <= padded // 2, index, index - padded) * pixel_size


def embedding_eigenvalues(covariance: CovarianceModel, padded_shape: tuple[int, int],
                          pixel_size: float) -> np.ndarray:
    """Eigenvalues ``FFT2(c)`` of the torus covariance (attribute units squared times cells).

    Parameters
    ----------
    covariance : CovarianceModel
        Only the structures are used (the latent field has no nugget).
    padded_shape : (int, int)
        Odd torus sizes ``(m_rows, m_cols)``.
    pixel_size : float
        Cell width in CRS units.
    """
    rows = lattice_offsets(padded_shape[0], pixel_size)
    cols = lattice_offsets(padded_shape[1], pixel_size)
    base = covariance.covariance_from_offsets(cols[None, :], -rows[:, None])
    return fft.fft2(base, workers=-1).real


def support_reach(covariance: CovarianceModel, pixel_size: float) -> tuple[float, float]:
    """Cells (rows, columns) beyond which the covariance is zero along each axis; inf without compact support.

    A spherical structure is zero outside the ellipse with semi-axes ``range`` along
    the azimuth ``theta`` and ``ratio * range`` across it, whose bounding box has
    half-widths ``sqrt(A^2 sin^2 + B^2 cos^2)`` (east) and ``sqrt(A^2 cos^2 + B^2 sin^2)``
    (north); the reach is that half-width in cells, rounded up.
    """
    reach_rows = reach_cols = 0.0
    for structure in covariance.structures:
        if structure.family not in COMPACT_FAMILIES:
            return math.inf, math.inf
        theta = math.radians(structure.azimuth)
        major, minor = structure.range, structure.range * structure.ratio
        east = math.hypot(major * math.sin(theta), minor * math.cos(theta))
        north = math.hypot(major * math.cos(theta), minor * math.sin(theta))
        reach_cols = max(reach_cols, math.ceil(east / pixel_size))
        reach_rows = max(reach_rows, math.ceil(north / pixel_size))
    return reach_rows, reach_cols


class UnconditionalGenerator:
    """Draws independent zero-mean realisations of the latent field on a lattice.

    Parameters
    ----------
    covariance : CovarianceModel
        Covariance model; its nugget is not simulated.
    shape : (int, int)
        Lattice size ``(n_rows, n_cols)``; row 0 is the northern edge.
    pixel_size : float
        Cell width and height (CRS units).
    max_padded_cells : int
        Size limit of the torus.

    Attributes
    ----------
    method : str
        ``"circulant embedding"`` or ``"Cholesky"``.
    padded_shape : (int, int) or None
        Torus size used by the FFT method.
    notes : list of str
        Enlargements of the padding that ended in an exact embedding: information, not a warning.
    warnings : list of str
        Fall-backs and approximations (no embedding within the size limit), in plain words.
    """

    def __init__(self, covariance: CovarianceModel, shape: tuple[int, int], pixel_size: float,
                 max_padded_cells: int = MAX_PADDED_CELLS) -> None:
        n_rows, n_cols = int(shape[0]), int(shape[1])
        if n_rows < 1 or n_cols < 1:
            raise FieldcastError(f"The simulation lattice needs at least one row and column, got {shape}.")
        if not (math.isfinite(pixel_size) and pixel_size > 0):
            raise FieldcastError(f"The pixel size must be a positive distance, got {pixel_size}.")
        self.shape = (n_rows, n_cols)
        self.pixel_size = float(pixel_size)
        self.covariance = covariance
        self.notes: list[str] = []
        self.warnings: list[str] = []
        self.padded_shape: tuple[int, int] | None = None
        self._scaled_root: np.ndarray | None = None
        self._cholesky: np.ndarray | None = None
        self._embed(max_padded_cells)

    def _embed(self, max_padded_cells: int) -> None:
        reach = support_reach(self.covariance, self.pixel_size)
        padded = tuple(odd_fast_length(min(2 * n - 1, n + r)) for n, r in zip(self.shape, reach))
        if padded[0] * padded[1] > max_padded_cells:
            raise FieldcastError(
                f"A simulation lattice of {self.shape[0]:,} x {self.shape[1]:,} cells needs a padded FFT grid "
                f"of {padded[0]:,} x {padded[1]:,} cells, more than the {max_padded_cells:,} allowed. "
                "Use a larger pixel size or a smaller extent.")
        while True:
            eigenvalues = embedding_eigenvalues(self.covariance, padded, self.pixel_size)
            largest = float(eigenvalues.max())
            smallest = float(eigenvalues.min())
            if smallest >= -NEGATIVE_TOLERANCE * largest:
                self._use_embedding(padded, eigenvalues)
                return
            grown = tuple(odd_fast_length(math.ceil(ENLARGEMENT * m)) for m in padded)
            if grown[0] * grown[1] > max_padded_cells:
                break
            self.notes.append(
                f"The circulant embedding on a {padded[0]} x {padded[1]} torus had negative eigenvalues "
                f"(smallest {smallest:.3g}, largest {largest:.3g}); the padding was enlarged to "
                f"{grown[0]} x {grown[1]} cells.")
            padded = grown
        if self.shape[0] * self.shape[1] <= CHOLESKY_MAX_CELLS:
            self.warnings.append(
                f"No circulant embedding up to {max_padded_cells:,} cells was non-negative definite; the "
                f"{self.shape[0]} x {self.shape[1]} lattice is simulated with a Cholesky factor instead.")
            self._use_cholesky()
            return
        lost = float(-eigenvalues[eigenvalues < 0].sum() / eigenvalues[eigenvalues > 0].sum())
        self.warnings.append(
            f"No circulant embedding up to {max_padded_cells:,} cells was non-negative definite; negative "
            f"eigenvalues were set to zero on a {padded[0]} x {padded[1]} torus, so the realisations are "
            f"approximate ({100 * lost:.2g}% of the spectrum dropped). A larger pixel size or a shorter "
            "range makes the embedding exact.")
        self._use_embedding(padded, eigenvalues)

    def _use_embedding(self, padded: tuple[int, int], eigenvalues: np.ndarray) -> None:
        self.padded_shape = padded
        self._scaled_root = np.sqrt(np.clip(eigenvalues, 0.0, None) / eigenvalues.size)

    def _use_cholesky(self) -> None:
        n_rows, n_cols = self.shape
        rows, cols = np.meshgrid(np.arange(n_rows), np.arange(n_cols), indexing="ij")
        xy = np.column_stack([cols.ravel(), -rows.ravel()]) * self.pixel_size
        self._cholesky = covariance_factor(self.covariance.cross_covariance(xy, xy))

    @property
    def method(self) -> str:
        """Name of the method in use."""
        return "Cholesky" if self._cholesky is not None else "circulant embedding"

    def draw_pair(self, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
        """Two independent realisations, each of shape ``(n_rows, n_cols)`` (attribute units)."""
        n_rows, n_cols = self.shape
        if self._cholesky is not None:
            both = self._cholesky @ rng.standard_normal((n_rows * n_cols, 2))
            return both[:, 0].reshape(n_rows, n_cols), both[:, 1].reshape(n_rows, n_cols)
        padded = self.padded_shape
        # pairs of independent standard normals read as the real and imaginary parts of W
        noise = rng.standard_normal((*padded, 2)).view(np.complex128)[..., 0]
        noise *= self._scaled_root
        field = fft.fft2(noise, workers=-1, overwrite_x=True)[:n_rows, :n_cols]
        return field.real.copy(), field.imag.copy()


def covariance_factor(matrix: np.ndarray) -> np.ndarray:
    """Lower factor ``L`` with ``L L^T = matrix`` for a symmetric non-negative definite matrix.

    Tries a Cholesky factor; when rounding makes the matrix numerically singular
    (smooth covariances on fine lattices) it uses the symmetric eigendecomposition
    with negative rounding-level eigenvalues set to zero, ``L = V sqrt(max(w, 0))``.
    """
    try:
        return linalg.cholesky(matrix, lower=True)
    except linalg.LinAlgError:
        values, vectors = linalg.eigh(matrix)
        return vectors * np.sqrt(np.clip(values, 0.0, None))[None, :]
