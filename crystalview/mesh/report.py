"""The print report as plain text (the JSON form is the report dict itself)."""
from __future__ import annotations


def _yes(b):
    return "yes" if b else "NO"


def report_text(rep):
    """Plain-text print report: what a person checks before sending a file to
    the printer.

    >>> rep = {"file": "cu.stl", "style": "ball-and-stick", "scale_mm_per_A": 10, "watertight": True}
    >>> for line in report_text(rep).splitlines()[:5]:
    ...     print(line)
    ...
    print report
      file             cu.stl
      model            ball-and-stick
      scale            10 mm per angstrom
      watertight       yes
    """
    box = rep.get("bounding_box_mm") or [0, 0, 0]
    bed = rep.get("bed_mm") or [0, 0, 0]
    what = rep.get("style", "")
    if rep.get("kit"):
        what += " kit (separate balls and rods)"
    if rep.get("clip_to_cell"):
        what += ", cut to the cell faces"
    if rep.get("base"):
        what += ", on a base plate"
    rows = [
        ("file", rep.get("file", "")),
        ("model", what),
        ("scale", f"{rep.get('scale_mm_per_A', 0):g} mm per angstrom"),
        ("watertight", _yes(rep.get("watertight"))),
        ("closed volume", _yes(rep.get("is_volume"))),
        ("bodies", str(rep.get("bodies"))),
        ("volume", f"{rep.get('volume_cm3', 0):.3f} cm^3"),
        ("mass", f"{rep.get('mass_g', 0):.1f} g at {rep.get('material_density_g_cm3', 0):g} g/cm^3"),
        ("bounding box", " x ".join(f"{x:.1f}" for x in box) + " mm"),
        ("fits the bed", f"{'yes' if rep.get('fits_bed') else 'NO'} ({' x '.join(f'{x:g}' for x in bed)} mm)"),
        ("triangles", f"{rep.get('triangles', 0):,}"),
        ("minimum feature", f"{rep.get('min_feature_mm', 0):g} mm"),
    ]
    if rep.get("chord_error_mm") is not None:
        rows.append(("chord error", f"{rep['chord_error_mm']:.3f} mm (spheres {rep.get('chord_error_spheres_mm', 0):.3f}, "
                                    f"rods {rep.get('chord_error_rods_mm', 0):.3f}; resolution "
                                    f"{rep.get('resolution_mm', 0):g} mm; {rep.get('sphere_segments')} sphere "
                                    f"segments, {rep.get('rod_sides')} rod sides)"))
    if rep.get("contact_mm2") is not None:
        rows.append(("contact", f"{rep['contact_mm2']:.1f} mm^2 on the bed"))
        rows.append(("overhang", f"{rep['overhang_mm2']:.0f} mm^2 beyond {rep.get('overhang_angle_deg', 45):g} deg "
                                 f"from vertical (needs support)"))
        rows.append(("unsupported span", f"{rep.get('unsupported_span_mm', 0):.1f} mm "
                                         f"({rep.get('unsupported_span_is', '')})"))
        rows.append(("orientation", rep.get("orientation", "")))
    if rep.get("base_mm"):
        b = rep["base_mm"]
        rows.append(("base", f"{b[0]:.1f} x {b[1]:.1f} mm, {b[2]:g} mm thick"))
    lab = rep.get("label")
    if lab:
        how = "embossed" if lab.get("style") == "emboss" else "engraved"
        lines = lab.get("lines") or []
        rows.append(("label", f"'{lab['text']}' {how} {lab['relief_mm']:g} mm, {lab['font']}, capitals "
                              f"{lab['cap_height_mm']:.1f} mm high, {len(lines)} line(s), strokes >= "
                              f"{lab['stroke_mm']:.2f} mm (minimum feature {rep.get('min_feature_mm', 0):g} mm)"))
    if rep.get("cell") == "hexagonal prism":
        rows.append(("cell", "hexagonal prism (12 corners, 2 face centres, 3 inside for hcp; --cell primitive "
                             "for the stored cell)"))
    if rep.get("volume_fraction_of_cell") is not None:
        note = ("the packing factor" if not rep.get("adjustments") else
                "the packing factor, plus the added neck rods")
        rows.append(("volume / cell volume", f"{rep['volume_fraction_of_cell']:.4f} ({note})"))
    w = max(len(k) for k, _ in rows)
    lines = ["print report"] + [f"  {k.ljust(w)}  {v}" for k, v in rows]
    for a in rep.get("adjustments") or []:
        lines.append(f"  note: {a}")
    parts = rep.get("parts") or []
    if parts:
        lines.append("  parts list:")
        for p in parts:
            if p["part"] == "rod":
                lines.append(f"    {p['count']:>4} x rod {p['diameter_mm']:g} mm across, {p['length_mm']:g} mm long")
            else:
                lines.append(f"    {p['count']:>4} x {p['part']}: {p['species']}, {p['diameter_mm']:g} mm across, "
                             f"{p['holes']} hole(s) {p['hole_diameter_mm']:g} mm"
                             + (f", angles between holes {p['angles_between_holes_deg']} deg"
                                if p.get("angles_between_holes_deg") else ""))
    if rep.get("caution"):
        lines.append(rep["caution"])
    return "\n".join(lines)
