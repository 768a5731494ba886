//! The pixel work shared by the CLI and the HTTP service: decode, calibrate, map, load series. Every
//! function here is synchronous and CPU-bound; the service calls them inside
//! `tokio::task::spawn_blocking`.

use isotint_core::beam::{calibrate_beam, BeamCalibration, BeamSpec};
use isotint_core::export;
use isotint_core::report::{report_pdf, ReportInputs};
use isotint_core::series::{map_series, LoadSeries, SeriesSpec};
use isotint_core::specimen::{find_specimen, find_specimen_with_light_field, MaskSource, MaskUsed};
use isotint_core::{
    CalibrationTable, CoreError, CoreResult, DecodeLimits, MapOptions, Mask, OrderMap, Photo,
};

/// Decodes a beam photo and builds a calibration table from it.
pub fn calibrate(
    photo: &[u8],
    spec: &BeamSpec,
    limits: &DecodeLimits,
) -> CoreResult<BeamCalibration> {
    let photo = Photo::decode(photo, limits)?;
    calibrate_beam(&photo, spec)
}

/// Which pixels of a photo a map covers.
#[derive(Debug, Clone, Copy)]
pub enum MaskChoice<'a> {
    /// A mask image (PNG or any format the photo decoder reads): non-zero = specimen.
    Given(&'a [u8]),
    /// The specimen found from the photo (`specimen::find_specimen`); the whole photo when
    /// nothing is found.
    Find,
    /// The specimen found from the photo helped by this light-field photo of the same set-up
    /// (`specimen::find_specimen_with_light_field`; any format the photo decoder reads, the
    /// photo's size); the whole photo when nothing is found.
    FindWithLightField(&'a [u8]),
    /// Every pixel.
    WholePhoto,
}

/// The specimen of `photo` as `choice` says: the decoded mask given, the specimen found from the
/// photo, or the whole photo (`None`; also when nothing is found).
pub fn choose_mask(
    photo: &Photo,
    choice: MaskChoice<'_>,
    limits: &DecodeLimits,
) -> CoreResult<(MaskSource, Option<Mask>)> {
    Ok(match choice {
        MaskChoice::Given(bytes) => (MaskSource::Given, Some(Mask::decode(bytes, limits)?)),
        MaskChoice::Find => match find_specimen(photo) {
            Some(found) => (MaskSource::Found, Some(found)),
            None => (MaskSource::WholePhoto, None),
        },
        MaskChoice::FindWithLightField(bytes) => {
            let light = Photo::decode(bytes, limits).map_err(|e| match e {
                CoreError::Decode(message) => CoreError::invalid(
                    "light_field_photo",
                    format!("could not be decoded: {message}"),
                ),
                other => other,
            })?;
            match find_specimen_with_light_field(photo, &light)? {
                Some(found) => (MaskSource::FoundWithLightField, Some(found)),
                None => (MaskSource::WholePhoto, None),
            }
        }
        MaskChoice::WholePhoto => (MaskSource::WholePhoto, None),
    })
}

/// Decodes a specimen photo (and mask, if given), chooses its specimen and maps its fringe
/// orders with `table`; answers the map and the mask it used.
pub fn map(
    photo: &[u8],
    mask: MaskChoice<'_>,
    table: &CalibrationTable,
    options: &MapOptions,
    limits: &DecodeLimits,
) -> CoreResult<(OrderMap, MaskUsed)> {
    let photo = Photo::decode(photo, limits)?;
    let (source, mask) = choose_mask(&photo, mask, limits)?;
    let map = isotint_core::map_orders(&photo, table, mask.as_ref(), options)?;
    Ok((map, MaskUsed::of(source, mask.as_ref())))
}

/// Decodes a specimen photo (and mask, if any), maps it with `table` and writes its PDF report
/// (`report::report_pdf`), decoding the photo once for both.
pub fn report(
    photo: &[u8],
    mask: Option<&[u8]>,
    table: &CalibrationTable,
    options: &MapOptions,
    limits: &DecodeLimits,
    inputs: &ReportInputs,
) -> CoreResult<Vec<u8>> {
    inputs.options.validate()?;
    let photo = Photo::decode(photo, limits)?;
    let mask = mask.map(|m| Mask::decode(m, limits)).transpose()?;
    let map = isotint_core::map_orders(&photo, table, mask.as_ref(), options)?;
    drop(mask);
    report_pdf(Some(&photo), &map, inputs)
}

/// Chooses the specimen and maps the photos of a load series with `table` (one photo decoded at
/// a time), then fits it (`series::map_series`); answers the fit and the mask it used. Without
/// a mask the specimen is found from the photo of the largest load (the most fringes, so the
/// clearest edges); when nothing is found there the series is refused naming `mask`, since a
/// series over the whole photo would fit its dark background.
pub fn series<P: AsRef<[u8]>>(
    spec: &SeriesSpec,
    photos: &[P],
    mask: Option<&[u8]>,
    table: &CalibrationTable,
    limits: &DecodeLimits,
) -> CoreResult<(LoadSeries, MaskUsed)> {
    let (source, mask) = match mask {
        Some(bytes) => (MaskSource::Given, Mask::decode(bytes, limits)?),
        None => {
            let (_, heaviest) = spec
                .loads_n()
                .iter()
                .zip(photos)
                .max_by(|a, b| a.0.total_cmp(b.0))
                .ok_or_else(|| CoreError::invalid("photo", "a series needs photos"))?;
            let photo = Photo::decode(heaviest.as_ref(), limits)?;
            let found = find_specimen(&photo).ok_or_else(|| {
                CoreError::invalid(
                    "mask",
                    "is needed: no specimen was found in the photo of the largest load (it is \
                     dark everywhere or the specimen fills it)",
                )
            })?;
            (MaskSource::Found, found)
        }
    };
    let used = MaskUsed::of(source, Some(&mask));
    let photos = photos.iter().map(|p| Photo::decode(p.as_ref(), limits));
    let series = map_series(spec, photos, &mask, table, &MapOptions::default())?;
    Ok((series, used))
}

/// A load series' slope map, fringes per N, as NPY float32 of shape (height, width), NaN where a
/// pixel was not fitted: the CLI's `--out` and the API's `slope` format.
pub fn slope_npy(series: &LoadSeries) -> Vec<u8> {
    export::npy_f32(&series.slope, series.height as usize, series.width as usize)
}

/// Peak memory of a map or calibration job per pixel of its photo, bytes: decoding, mapping,
/// the finished map, its compact form and storing it measured 24.6 on a 12-megapixel JPEG
/// (`cargo bench --bench concurrent_maps`, docs/validation.md); 32 leaves room for a mask
/// (3 bytes a pixel) and the allocator.
pub const JOB_BYTES_PER_PIXEL: u64 = 32;

/// The memory a job on `photo` will take, estimated from the photo's header alone (nothing
/// is decoded), bytes: [`JOB_BYTES_PER_PIXEL`] per pixel plus the request's `request_bytes`.
/// A header that cannot be read, or a size past `limits`, is refused as the decoder would.
pub fn job_memory(photo: &[u8], request_bytes: usize, limits: &DecodeLimits) -> CoreResult<u64> {
    Ok(photo_pixels(photo, limits, "photo")? * JOB_BYTES_PER_PIXEL + request_bytes as u64)
}

/// What a light-field photo adds to a map job, bytes a pixel: its decoded samples (up to 6)
/// and `specimen::find_specimen_with_light_field`'s flags and work queue (7 + 4), rounded up;
/// counted, not measured.
pub const LIGHT_FIELD_BYTES_PER_PIXEL: u64 = 24;

/// The memory a light-field photo adds to a map job, bytes ([`LIGHT_FIELD_BYTES_PER_PIXEL`] a
/// pixel), from its header alone; a header that cannot be read, or a size past `limits`, is
/// refused naming `light_field_photo`.
pub fn light_field_memory(light: &[u8], limits: &DecodeLimits) -> CoreResult<u64> {
    Ok(photo_pixels(light, limits, "light_field_photo")? * LIGHT_FIELD_BYTES_PER_PIXEL)
}

/// The memory a load series of `photos` photos the size of `first` will take, bytes: the
/// photos are mapped one at a time, and each map's orders (a float a pixel) are kept for the
/// fit; plus the request's `request_bytes`. Read from `first`'s header alone, as
/// [`job_memory`].
pub fn series_memory(
    first: &[u8],
    photos: usize,
    request_bytes: usize,
    limits: &DecodeLimits,
) -> CoreResult<u64> {
    let per_pixel = JOB_BYTES_PER_PIXEL + (photos * std::mem::size_of::<f32>()) as u64;
    Ok(photo_pixels(first, limits, "photo")? * per_pixel + request_bytes as u64)
}

/// Pixels of `photo`, from its header alone; errors name `field`.
fn photo_pixels(photo: &[u8], limits: &DecodeLimits, field: &'static str) -> CoreResult<u64> {
    let (width, height) = isotint_core::colour::image_size(photo, limits, field)?;
    Ok(u64::from(width) * u64::from(height))
}
