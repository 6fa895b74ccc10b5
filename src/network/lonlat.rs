//! WGS84 longitude and latitude: lengths along the ellipsoid and the local plan projection a network
//! imported from lon/lat is drawn in.
//!
//! Pipe lengths are geodesic distances on the WGS84 ellipsoid (Karney 2013, "Algorithms for geodesics",
//! J. Geodesy 87, through the `geographiclib-rs` crate), summed over the segments of the line. The map
//! uses a local equirectangular projection about an origin near the middle of the district:
//! `x = N(lat0) cos(lat0) (lon - lon0)`, `y = M(lat0) (lat - lat0)` (angles in radians), with `M` and `N`
//! the meridional and prime-vertical radii of curvature of the ellipsoid at the origin's latitude. Over
//! a few kilometres its distortion is far below a survey's accuracy, it is exactly invertible, and the
//! origin stored in the network (`origin_lon`, `origin_lat`) is all an export needs to give lon/lat back.
//! Snapping (`snap` in the import's length unit) is measured in this projection.

use geographiclib_rs::{Geodesic, InverseGeodesic};

/// A WGS84 position in degrees.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LonLat {
    pub lon_deg: f64,
    pub lat_deg: f64,
}

/// WGS84 semi-major axis (m) and flattening: the defining constants of the ellipsoid (NIMA TR8350.2).
const WGS84_A_M: f64 = 6_378_137.0;
const WGS84_F: f64 = 1.0 / 298.257_223_563;

/// Geodesic distance in metres between two WGS84 positions (Karney 2013; accurate to nanometres).
pub fn geodesic_distance_m(a: LonLat, b: LonLat) -> f64 {
    let geodesic = Geodesic::wgs84();
    InverseGeodesic::<f64>::inverse(&geodesic, a.lat_deg, a.lon_deg, b.lat_deg, b.lon_deg)
}

/// Length in metres of a line through `points` (lon/lat), the sum of its segments' geodesic distances.
pub fn line_length_m(points: &[LonLat]) -> f64 {
    let geodesic = Geodesic::wgs84();
    points
        .windows(2)
        .map(|pair| match pair {
            [a, b] => InverseGeodesic::<f64>::inverse(
                &geodesic, a.lat_deg, a.lon_deg, b.lat_deg, b.lon_deg,
            ),
            _ => 0.0,
        })
        .sum()
}

/// The local equirectangular projection about `origin` (see the module docs), in metres.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LocalProjection {
    pub origin: LonLat,
    /// Metres per radian of longitude and of latitude at the origin: N cos(lat0) and M.
    east_m_per_rad: f64,
    north_m_per_rad: f64,
}

impl LocalProjection {
    /// The projection about `origin`. Radii of curvature of the ellipsoid: M = a (1 - e^2) / W^3,
    /// N = a / W with W = sqrt(1 - e^2 sin^2 lat) (any geodesy text, e.g. NIMA TR8350.2 section 4).
    pub fn new(origin: LonLat) -> Self {
        let e2 = WGS84_F * (2.0 - WGS84_F);
        let lat = origin.lat_deg.to_radians();
        let w = (1.0 - e2 * lat.sin().powi(2)).sqrt();
        let n = WGS84_A_M / w;
        let m = WGS84_A_M * (1.0 - e2) / (w * w * w);
        Self {
            origin,
            east_m_per_rad: n * lat.cos(),
            north_m_per_rad: m,
        }
    }

    /// East and north of the origin, in metres.
    pub fn forward_m(&self, point: LonLat) -> (f64, f64) {
        let mut dlon = point.lon_deg - self.origin.lon_deg;
        // A district straddling the antimeridian stays in one piece.
        if dlon > 180.0 {
            dlon -= 360.0;
        } else if dlon < -180.0 {
            dlon += 360.0;
        }
        (
            self.east_m_per_rad * dlon.to_radians(),
            self.north_m_per_rad * (point.lat_deg - self.origin.lat_deg).to_radians(),
        )
    }

    /// The lon/lat of a point `east_m`, `north_m` from the origin: the exact inverse of [`Self::forward_m`].
    pub fn inverse(&self, east_m: f64, north_m: f64) -> LonLat {
        let lon = self.origin.lon_deg + (east_m / self.east_m_per_rad).to_degrees();
        let lon_deg = if lon > 180.0 {
            lon - 360.0
        } else if lon < -180.0 {
            lon + 360.0
        } else {
            lon
        };
        LonLat {
            lon_deg,
            lat_deg: self.origin.lat_deg + (north_m / self.north_m_per_rad).to_degrees(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn geodesic_distance_matches_the_published_example() {
        // GeographicLib documentation (Karney), Inverse example: Wellington, NZ (41.32S, 174.81E) to
        // Salamanca, Spain (40.96N, 5.50W) is 19959679.267 m on WGS84.
        let wellington = LonLat {
            lon_deg: 174.81,
            lat_deg: -41.32,
        };
        let salamanca = LonLat {
            lon_deg: -5.50,
            lat_deg: 40.96,
        };
        let d = geodesic_distance_m(wellington, salamanca);
        assert!((d - 19_959_679.267).abs() < 0.001, "{d}");
        assert!((line_length_m(&[wellington, salamanca]) - d).abs() < 1e-9);
    }

    #[test]
    fn one_degree_of_latitude_and_longitude_at_the_equator() {
        // WGS84: the equator is a circle of radius a, so 1 degree of longitude along it is a pi / 180
        // = 111319.4908 m (from the defining constant); 1 degree of latitude at the equator is about
        // 110574 m (from memory, standard tables of degree lengths).
        let d = geodesic_distance_m(
            LonLat {
                lon_deg: 0.0,
                lat_deg: 0.0,
            },
            LonLat {
                lon_deg: 1.0,
                lat_deg: 0.0,
            },
        );
        assert!(
            (d - WGS84_A_M * std::f64::consts::PI / 180.0).abs() < 1e-6,
            "{d}"
        );
        let d = geodesic_distance_m(
            LonLat {
                lon_deg: 0.0,
                lat_deg: 0.0,
            },
            LonLat {
                lon_deg: 0.0,
                lat_deg: 1.0,
            },
        );
        assert!((d - 110_574.0).abs() < 1.0, "{d}");
    }

    #[test]
    fn the_local_projection_inverts_exactly_and_measures_like_the_ellipsoid_nearby() {
        let origin = LonLat {
            lon_deg: -122.3,
            lat_deg: 47.6,
        };
        let projection = LocalProjection::new(origin);
        let point = LonLat {
            lon_deg: -122.29,
            lat_deg: 47.607,
        };
        let (x, y) = projection.forward_m(point);
        let back = projection.inverse(x, y);
        assert!((back.lon_deg - point.lon_deg).abs() < 1e-12);
        assert!((back.lat_deg - point.lat_deg).abs() < 1e-12);
        // About 1 km away the plan distance agrees with the geodesic within 1e-4 (10 cm per km; the
        // equirectangular scale error grows with the distance from the origin's latitude), well inside
        // any snapping distance; lengths are measured on the ellipsoid, not in the plan.
        let plan = x.hypot(y);
        let geodesic = geodesic_distance_m(origin, point);
        assert!(
            (plan - geodesic).abs() < 1e-4 * geodesic,
            "{plan} {geodesic}"
        );
    }
}
