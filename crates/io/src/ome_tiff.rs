//! volume.ome.tif: the dB volume as OME-TIFF, so that the image viewers of
//! the field (Fiji/ImageJ through Bio-Formats, napari through tifffile)
//! open it at its physical scale. One float32 page per stored frame; the
//! OME-XML in the first page's ImageDescription (OME-TIFF specification,
//! Open Microscopy Environment, schema 2016-06) names the axes and pixel
//! sizes: X = A-lines (lateral), Y = depth (down, single pass in air),
//! Z = stored frames (slow axis), each PhysicalSize in µm where known.
//! Plain data in, one file out (written to a temporary name and renamed by
//! the caller's staging).

use anyhow::{anyhow, Context, Result};
use ndarray::Array2;
use std::path::Path;
use tiff::encoder::{colortype, TiffEncoder};
use tiff::tags::Tag;

/// Axes and scale of the volume.
pub struct OmeScale {
    pub name: String,
    pub depth_spacing_um: f64,
    pub aline_spacing_um: Option<f64>,
    pub frame_spacing_um: Option<f64>,
}

/// The OME-XML block for a float32 X × Y × Z stack.
pub fn ome_xml(alines: usize, depth: usize, frames: usize, s: &OmeScale) -> String {
    // The unit attributes are left out: their default is µm (OME schema
    // 2016-06), and the TIFF ASCII tag cannot hold "µ".
    let size = |axis: &str, v: Option<f64>| v.map(|v| format!(" PhysicalSize{axis}=\"{v}\"")).unwrap_or_default();
    // ASCII only (a TIFF ASCII tag): other characters as XML character references.
    let name: String = s
        .name
        .replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('"', "&quot;")
        .chars()
        .map(|c| if c.is_ascii() { c.to_string() } else { format!("&#{};", c as u32) })
        .collect();
    format!(
        concat!(
            "<?xml version=\"1.0\" encoding=\"UTF-8\"?>",
            "<OME xmlns=\"http://www.openmicroscopy.org/Schemas/OME/2016-06\" ",
            "xmlns:xsi=\"http://www.w3.org/2001/XMLSchema-instance\" ",
            "xsi:schemaLocation=\"http://www.openmicroscopy.org/Schemas/OME/2016-06 http://www.openmicroscopy.org/Schemas/OME/2016-06/ome.xsd\" ",
            "Creator=\"fringeflow {version}\">",
            "<Image ID=\"Image:0\" Name=\"{name}\">",
            "<Description>dB (20 log10 of amplitude in detector counts); X: A-lines, Y: depth (single pass, in air), Z: stored frames</Description>",
            "<Pixels ID=\"Pixels:0\" DimensionOrder=\"XYZCT\" Type=\"float\" SizeX=\"{x}\" SizeY=\"{y}\" SizeZ=\"{z}\" SizeC=\"1\" SizeT=\"1\"{px}{py}{pz} BigEndian=\"false\">",
            "<Channel ID=\"Channel:0:0\" Name=\"dB\" SamplesPerPixel=\"1\"/>",
            "<TiffData IFD=\"0\" PlaneCount=\"{z}\"/>",
            "</Pixels></Image></OME>"
        ),
        version = env!("CARGO_PKG_VERSION"),
        name = name,
        x = alines,
        y = depth,
        z = frames,
        px = size("X", s.aline_spacing_um),
        py = size("Y", Some(s.depth_spacing_um)),
        pz = size("Z", s.frame_spacing_um),
    )
}

/// Writes `frames` pages of (depth × A-lines) dB images, asked for one at a
/// time from `frame`, as an OME-TIFF at `path` (BigTIFF past 3.5 GB).
pub fn write_ome_tiff(path: &Path, frames: usize, depth: usize, alines: usize, scale: &OmeScale, mut frame: impl FnMut(usize) -> Result<Array2<f32>>) -> Result<()> {
    let file = std::io::BufWriter::new(std::fs::File::create(path).with_context(|| format!("creating {}", path.display()))?);
    let xml = ome_xml(alines, depth, frames, scale);
    let err = |e: tiff::TiffError| anyhow!("writing {}: {e}", path.display());
    let bytes = frames as u64 * depth as u64 * alines as u64 * 4;
    macro_rules! pages {
        ($encoder:expr) => {{
            let mut tiff = $encoder.map_err(err)?;
            for f in 0..frames {
                let image = frame(f)?;
                let data = image.as_standard_layout();
                let data = data.as_slice().expect("standard layout");
                let mut page = tiff.new_image::<colortype::Gray32Float>(alines as u32, depth as u32).map_err(err)?;
                if f == 0 {
                    page.encoder().write_tag(Tag::ImageDescription, xml.as_str()).map_err(err)?;
                }
                page.write_data(data).map_err(err)?;
            }
        }};
    }
    if bytes > 3_500_000_000 {
        pages!(TiffEncoder::new_big(file));
    } else {
        pages!(TiffEncoder::new(file));
    }
    Ok(())
}
