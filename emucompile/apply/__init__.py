"""Replaying a bundle over a waveform: the time-varying FIR, noise, recordings in and out.

May import: ``models``, ``bundle``, ``errors``.

Modules: ``channel`` (:class:`TimeVaryingFir`, :func:`apply_channel`,
:class:`WhiteNoise`: numerics on arrays), ``recordings`` (reading npy, raw cf32
and SigMF inputs through :mod:`emucompile.bundle.readers`; writing outputs
atomically), ``run`` (:func:`apply_bundle` over named steps), ``replay`` (the
old names, gathered).

Notes
-----
The channel is y[n] = sum_k h_n[k] x[n - k] with h_n = g(t_n) @ fir_map, the FIR at
the output instant t_n = start_s + n / sample_rate (gain sample k at k / update_rate).
Two exact rewritings compute it, both checked against that sum written out in
float64 (``tests/apply/test_replay.py``, 1e-5 relative): the *interval* engine
(y = x * h_k + theta (x * (h_{k+1} - h_k)) per update interval, all intervals of a
block filtered at once by overlap-save, filter spectra by linearity from the rows'
spectra) and the *per-tap* engine (each row filters once, times its interpolated
gain). ``auto`` takes the interval engine from 16 samples per update interval
(``INTERVAL_ENGINE_MIN_SAMPLES``, measured), per-tap below and whenever every tap
is on the grid (no filtering at all; products rounded once).

Between updates: linear (default) or hold; a bundle's ``target.between_updates``
decides when present. Linear against the band-limited reconstruction: -37.1 dB
for a tone at update_rate / 16, -41.3 dB over a classical spectrum with
f_D = update_rate / 16 (closed form and measurement in the tests).

Length: a bundle covers [0, duration); a longer input is refused unless ``loop``
(indices modulo n_samples: seamless for a periodic bundle; otherwise the last
sample runs to the first along one straight line). Without loop a non-periodic
bundle holds its last sample over its last interval.

SNR: noise variance = nominal output power / 10^(SNR/10) over the whole band, the
nominal power being sum_tx mean|x_tx|^2 times C = sum_i P_i sum_n fir_map[i, n]^2
(the manifest's tap powers; C is a link's power gain for a white input). Noise of
sample n comes from ``SeedSequence(seed, spawn_key=(n // 65536,))``: independent
of the block size. The seed is drawn and recorded when not given.

Files: npy in and out (1-D or (n, n_tx) -> (n, n_rx)), raw cf32 (channels
interleaved sample by sample), SigMF ``cf32_le`` / ``cf64_le`` / ``ci16_le`` with
``core:num_channels`` interleaved. ci16 stays ci16 on the same code scale (clipped
values counted). Outputs go to temporary siblings and are linked into place (no
replacing without ``force``), data first, metadata last; an error, Ctrl-C or
SIGTERM removes them. Bad input is refused before anything is written.
"""
