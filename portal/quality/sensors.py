"""Sensor positions as a quality result stores them for its sensor plot. Used by the quality
job and by the bulk study of ``portal.demo``."""


def sensor_positions(ch_names, positions):
    """Known positions (m) by channel name, for the sensor plot."""
    import numpy as np

    from cairn_science.qc.positions import resolve_positions

    xyz = resolve_positions(ch_names, positions)
    return {name: [round(float(v), 5) for v in row]
            for name, row in zip(ch_names, xyz, strict=True) if np.all(np.isfinite(row))}
