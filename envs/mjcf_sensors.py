"""Add named-state sensors to a model through ``mujoco.MjSpec`` and find their data.

Named quantities are read from MuJoCo sensors so that the batched runtime gets
them from ``sensordata`` without Python per env. These helpers add the few
sensor types kinetome uses before compile, checking that the object exists,
and map sensor names to flat ``sensordata`` indices after compile.
"""

from __future__ import annotations

import mujoco

__all__ = [
    "add_framepos",
    "add_framelinvel",
    "add_framequat",
    "add_contact_force",
    "sensor_index",
]

# Object kinds a frame sensor may be attached to, by the words used in MJCF.
# "body" is the body's inertial frame (xipos, its centre of mass); "xbody" is
# the body frame itself (xpos), as in MJCF's objtype attribute.
_OBJTYPES = {
    "site": mujoco.mjtObj.mjOBJ_SITE,
    "body": mujoco.mjtObj.mjOBJ_BODY,
    "xbody": mujoco.mjtObj.mjOBJ_XBODY,
    "geom": mujoco.mjtObj.mjOBJ_GEOM,
    "camera": mujoco.mjtObj.mjOBJ_CAMERA,
}


def add_framepos(spec: mujoco.MjSpec, name: str, objtype: str, objname: str) -> mujoco.MjsSensor:
    """World position (3,) m of a site, body, geom or camera frame."""
    return _add_frame(spec, mujoco.mjtSensor.mjSENS_FRAMEPOS, name, objtype, objname)


def add_framelinvel(spec: mujoco.MjSpec, name: str, objtype: str, objname: str) -> mujoco.MjsSensor:
    """World linear velocity (3,) m/s of a site, body, geom or camera frame."""
    return _add_frame(spec, mujoco.mjtSensor.mjSENS_FRAMELINVEL, name, objtype, objname)


def add_framequat(spec: mujoco.MjSpec, name: str, objtype: str, objname: str) -> mujoco.MjsSensor:
    """World orientation (4,) as a unit quaternion (w, x, y, z) of a frame."""
    return _add_frame(spec, mujoco.mjtSensor.mjSENS_FRAMEQUAT, name, objtype, objname)


def add_contact_force(spec: mujoco.MjSpec, name: str, geom: str) -> mujoco.MjsSensor:
    """Contact sensor (3,) N: the net contact force on ``geom`` from what it touches, world axes.

    MuJoCo's contact sensor with ``reduce="netforce"`` matching the geom as
    ``geom2``, so the force is the one acting *on* it (0 when it touches nothing);
    the gymnasium adapters read their feet the same way (per body).
    """
    _check_new_name(spec, name)
    _check_object(spec, "geom", geom, name)
    # intprm: data = force (bit 1 of mjtConDataField), reduce = netforce (3), num = 1
    return spec.add_sensor(name=name, type=mujoco.mjtSensor.mjSENS_CONTACT, reftype=mujoco.mjtObj.mjOBJ_GEOM, refname=geom, intprm=[1 << 1, 3, 1])


def sensor_index(model: mujoco.MjModel, name: str) -> tuple[int, ...]:
    """Flat ``sensordata`` indices of the sensor called ``name`` in a compiled model."""
    sid = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_SENSOR, name)
    if sid < 0:
        known = [mujoco.mj_id2name(model, mujoco.mjtObj.mjOBJ_SENSOR, i) for i in range(model.nsensor)]
        raise KeyError(f"sensor {name!r} not found in the model; known sensors: {', '.join(map(str, known))}")
    adr, dim = int(model.sensor_adr[sid]), int(model.sensor_dim[sid])
    return tuple(range(adr, adr + dim))


def _add_frame(spec: mujoco.MjSpec, kind, name: str, objtype: str, objname: str) -> mujoco.MjsSensor:
    _check_new_name(spec, name)
    if objtype not in _OBJTYPES:
        raise ValueError(
            f"sensor {name!r}: objtype must be one of {', '.join(_OBJTYPES)}, got {objtype!r}"
        )
    _check_object(spec, objtype, objname, name)
    return spec.add_sensor(name=name, type=kind, objtype=_OBJTYPES[objtype], objname=objname)


def _check_new_name(spec: mujoco.MjSpec, name: str) -> None:
    if not name:
        raise ValueError("sensor name must be a non-empty string, got ''")
    if any(s.name == name for s in spec.sensors):
        raise ValueError(f"sensor {name!r} already exists in the spec; choose another name")


def _check_object(spec: mujoco.MjSpec, objtype: str, objname: str, sensor: str) -> None:
    finder = {"site": spec.site, "body": spec.body, "xbody": spec.body, "geom": spec.geom, "camera": spec.camera}
    if finder[objtype](objname) is None:
        pool = {
            "site": spec.sites,
            "body": spec.bodies,
            "xbody": spec.bodies,
            "geom": spec.geoms,
            "camera": spec.cameras,
        }[objtype]
        known = sorted(o.name for o in pool if o.name)
        raise ValueError(
            f"sensor {sensor!r}: {objtype} {objname!r} not found in the model; known: {', '.join(known)}"
        )
