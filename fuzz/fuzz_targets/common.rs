//! The grid the map targets read onto: 6 x 5 nodes, 10 m apart.

use tidemark::grid::Grid;

pub fn grid() -> Grid {
    Grid {
        origin_x: 1000.0,
        origin_y: 2000.0,
        dx: 10.0,
        dy: 10.0,
        nx: 6,
        ny: 5,
        rotation: 0.0,
        epsg: Some(32631),
        null_value: -999.25,
    }
}
