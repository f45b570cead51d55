"""Write sensor_bracket.step: the mid-surface of the bent sheet bracket of sensor_bracket.toml.

The faces are made with gmsh's OpenCASCADE kernel and written as a STEP surface model whose
parts carry names (mount_leg, bend, upright); modebridge reads those names as regions.
Run from this folder:  python make_sensor_bracket_step.py
"""

from pathlib import Path

from bridge.meshing.gmsh import profile_faces, write_step

# mid-line of the profile in the y-z plane (m): the mounting leg along y, the upright along z,
# bent on a 3 mm mid-surface radius; 60 mm wide (along x)
POINTS = [[0.045, 0.0], [0.0, 0.0], [0.0, 0.06]]
RADII = [0.003]
WIDTH = 0.06

if __name__ == "__main__":
    out = Path(__file__).with_name("sensor_bracket.step")
    write_step(out, lambda gmsh: profile_faces(gmsh, POINTS, WIDTH, RADII), labels=["mount_leg", "bend", "upright"])
    print(f"wrote {out}")
