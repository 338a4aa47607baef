"""Tablet file migration 0001: the first record tables (frozen; never edit a migration once released)."""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0001_initial"

DDL = """
CREATE TABLE device (
    id CHAR(32) NOT NULL,
    label VARCHAR NOT NULL,
    role VARCHAR(32) NOT NULL,
    token_hash VARCHAR,
    enrolled_at DATETIME,
    last_seen_at DATETIME,
    revoked_at DATETIME,
    CONSTRAINT pk_device PRIMARY KEY (id),
    CONSTRAINT uq_device_label UNIQUE (label),
    CONSTRAINT ck_device_role CHECK (role IN ('recorder', 'manager', 'analyst'))
);

CREATE TABLE site (
    id CHAR(32) NOT NULL,
    code VARCHAR NOT NULL,
    name VARCHAR NOT NULL,
    crs_epsg BIGINT NOT NULL,
    grid JSON,
    vertical_offset_m DOUBLE NOT NULL,
    shoring_check_depth_m DOUBLE NOT NULL,
    z_tolerance_m DOUBLE NOT NULL,
    CONSTRAINT pk_site PRIMARY KEY (id),
    CONSTRAINT uq_site_code UNIQUE (code)
);

CREATE TABLE control_point (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    code VARCHAR NOT NULL,
    e DOUBLE NOT NULL,
    n DOUBLE NOT NULL,
    z DOUBLE NOT NULL,
    crs_e DOUBLE,
    crs_n DOUBLE,
    CONSTRAINT pk_control_point PRIMARY KEY (id),
    CONSTRAINT uq_control_point_site_id_code UNIQUE (site_id, code),
    CONSTRAINT fk_control_point_site_id_site FOREIGN KEY(site_id) REFERENCES site (id)
);

CREATE TABLE gnss_fix (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    raw_sentences JSON NOT NULL,
    lat DOUBLE NOT NULL,
    lon DOUBLE NOT NULL,
    orthometric_height_m DOUBLE,
    geoid_separation_m DOUBLE,
    ellipsoidal_height_m DOUBLE,
    fix_quality BIGINT NOT NULL,
    hdop DOUBLE,
    sigma_lat_m DOUBLE,
    sigma_lon_m DOUBLE,
    sigma_alt_m DOUBLE,
    fixed_at DATETIME NOT NULL,
    CONSTRAINT pk_gnss_fix PRIMARY KEY (id),
    CONSTRAINT fk_gnss_fix_site_id_site FOREIGN KEY(site_id) REFERENCES site (id)
);

CREATE TABLE horizon (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    code VARCHAR NOT NULL,
    label VARCHAR NOT NULL,
    "order" BIGINT NOT NULL,
    age_min_ka DOUBLE,
    age_max_ka DOUBLE,
    CONSTRAINT pk_horizon PRIMARY KEY (id),
    CONSTRAINT uq_horizon_site_id_code UNIQUE (site_id, code),
    CONSTRAINT fk_horizon_site_id_site FOREIGN KEY(site_id) REFERENCES site (id)
);

CREATE TABLE number_block (
    id CHAR(32) NOT NULL,
    device_id CHAR(32) NOT NULL,
    first BIGINT NOT NULL,
    last BIGINT NOT NULL,
    issued_at DATETIME NOT NULL,
    CONSTRAINT pk_number_block PRIMARY KEY (id),
    CONSTRAINT uq_number_block_first UNIQUE (first),
    CONSTRAINT fk_number_block_device_id_device FOREIGN KEY(device_id) REFERENCES device (id)
);

CREATE INDEX ix_number_block_device_id ON number_block (device_id);

CREATE TABLE season (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    label VARCHAR NOT NULL,
    starts_on DATE NOT NULL,
    ends_on DATE,
    CONSTRAINT pk_season PRIMARY KEY (id),
    CONSTRAINT uq_season_site_id_label UNIQUE (site_id, label),
    CONSTRAINT fk_season_site_id_site FOREIGN KEY(site_id) REFERENCES site (id)
);

CREATE TABLE trench (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    code VARCHAR NOT NULL,
    outline JSON NOT NULL,
    seasons_opened JSON NOT NULL,
    max_depth_m DOUBLE,
    CONSTRAINT pk_trench PRIMARY KEY (id),
    CONSTRAINT uq_trench_site_id_code UNIQUE (site_id, code),
    CONSTRAINT fk_trench_site_id_site FOREIGN KEY(site_id) REFERENCES site (id)
);

CREATE TABLE station_setup (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    method VARCHAR(32) NOT NULL,
    occupied_point_id CHAR(32),
    station_code VARCHAR NOT NULL,
    e DOUBLE NOT NULL,
    n DOUBLE NOT NULL,
    z DOUBLE NOT NULL,
    instrument_height_m DOUBLE NOT NULL,
    angle_unit VARCHAR(32) NOT NULL,
    orientation DOUBLE NOT NULL,
    residuals JSON NOT NULL,
    set_up_at DATETIME NOT NULL,
    recorder VARCHAR NOT NULL,
    CONSTRAINT pk_station_setup PRIMARY KEY (id),
    CONSTRAINT fk_station_setup_site_id_site FOREIGN KEY(site_id) REFERENCES site (id),
    CONSTRAINT ck_station_setup_method CHECK (method IN ('occupied', 'resection')),
    CONSTRAINT fk_station_setup_occupied_point_id_control_point FOREIGN KEY(occupied_point_id) REFERENCES control_point (id),
    CONSTRAINT ck_station_setup_angle_unit CHECK (angle_unit IN ('deg', 'gon'))
);

CREATE TABLE unit (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    trench_id CHAR(32) NOT NULL,
    code VARCHAR NOT NULL,
    kind VARCHAR(32) NOT NULL,
    description VARCHAR NOT NULL,
    munsell VARCHAR,
    munsell_condition VARCHAR(32),
    texture VARCHAR(32),
    status VARCHAR(32) NOT NULL,
    opened_on DATE NOT NULL,
    closed_on DATE,
    recorder VARCHAR NOT NULL,
    horizon_id CHAR(32),
    CONSTRAINT pk_unit PRIMARY KEY (id),
    CONSTRAINT uq_unit_site_id_code UNIQUE (site_id, code),
    CONSTRAINT fk_unit_site_id_site FOREIGN KEY(site_id) REFERENCES site (id),
    CONSTRAINT fk_unit_trench_id_trench FOREIGN KEY(trench_id) REFERENCES trench (id),
    CONSTRAINT ck_unit_kind CHECK (kind IN ('deposit', 'fill', 'cut', 'structure')),
    CONSTRAINT ck_unit_munsell_condition CHECK (munsell_condition IN ('moist', 'dry')),
    CONSTRAINT ck_unit_texture CHECK (texture IN ('sand', 'loamy_sand', 'sandy_loam', 'loam', 'silt_loam', 'silt', 'sandy_clay_loam', 'clay_loam', 'silty_clay_loam', 'sandy_clay', 'silty_clay', 'clay', 'gravel', 'volcanic_ash')),
    CONSTRAINT ck_unit_status CHECK (status IN ('open', 'closed')),
    CONSTRAINT fk_unit_horizon_id_horizon FOREIGN KEY(horizon_id) REFERENCES horizon (id)
);

CREATE INDEX ix_unit_trench_id ON unit (trench_id);

CREATE TABLE relation (
    id CHAR(32) NOT NULL,
    site_id CHAR(32) NOT NULL,
    upper_unit_id CHAR(32) NOT NULL,
    lower_unit_id CHAR(32) NOT NULL,
    kind VARCHAR(32) NOT NULL,
    CONSTRAINT pk_relation PRIMARY KEY (id),
    CONSTRAINT fk_relation_site_id_site FOREIGN KEY(site_id) REFERENCES site (id),
    CONSTRAINT fk_relation_upper_unit_id_unit FOREIGN KEY(upper_unit_id) REFERENCES unit (id),
    CONSTRAINT fk_relation_lower_unit_id_unit FOREIGN KEY(lower_unit_id) REFERENCES unit (id),
    CONSTRAINT ck_relation_kind CHECK (kind IN ('above', 'cuts', 'fills', 'same_as', 'contemporary'))
);

CREATE INDEX ix_relation_lower_unit_id ON relation (lower_unit_id);

CREATE INDEX ix_relation_upper_unit_id ON relation (upper_unit_id);

CREATE TABLE shot (
    id CHAR(32) NOT NULL,
    setup_id CHAR(32) NOT NULL,
    hz DOUBLE NOT NULL,
    zenith DOUBLE NOT NULL,
    slope_distance_m DOUBLE NOT NULL,
    target_height_m DOUBLE NOT NULL,
    prism_constant_mm DOUBLE NOT NULL,
    shot_at DATETIME NOT NULL,
    raw_line VARCHAR,
    CONSTRAINT pk_shot PRIMARY KEY (id),
    CONSTRAINT fk_shot_setup_id_station_setup FOREIGN KEY(setup_id) REFERENCES station_setup (id)
);

CREATE INDEX ix_shot_setup_id ON shot (setup_id);

CREATE TABLE spit (
    id CHAR(32) NOT NULL,
    unit_id CHAR(32) NOT NULL,
    number BIGINT NOT NULL,
    top_z DOUBLE NOT NULL,
    bottom_z DOUBLE NOT NULL,
    area_m2 DOUBLE NOT NULL,
    sieved_volume_l DOUBLE,
    mesh_mm DOUBLE,
    buckets BIGINT NOT NULL,
    CONSTRAINT pk_spit PRIMARY KEY (id),
    CONSTRAINT uq_spit_unit_id_number UNIQUE (unit_id, number),
    CONSTRAINT fk_spit_unit_id_unit FOREIGN KEY(unit_id) REFERENCES unit (id)
);

CREATE TABLE find (
    id CHAR(32) NOT NULL,
    number BIGINT NOT NULL,
    site_id CHAR(32) NOT NULL,
    season_id CHAR(32) NOT NULL,
    trench_id CHAR(32) NOT NULL,
    unit_id CHAR(32) NOT NULL,
    spit_id CHAR(32),
    device_id CHAR(32),
    category VARCHAR(32) NOT NULL,
    material VARCHAR NOT NULL,
    taxon VARCHAR,
    element VARCHAR,
    count BIGINT NOT NULL,
    weight_g DOUBLE,
    length_mm DOUBLE,
    width_mm DOUBLE,
    thickness_mm DOUBLE,
    bearing_deg DOUBLE,
    plunge_deg DOUBLE,
    recovery VARCHAR(32) NOT NULL,
    e DOUBLE,
    n DOUBLE,
    z DOUBLE,
    position_source VARCHAR(32) NOT NULL,
    position_sigma_m DOUBLE,
    shot_id CHAR(32),
    gnss_fix_id CHAR(32),
    bucket VARCHAR,
    found_at DATETIME NOT NULL,
    recorder VARCHAR NOT NULL,
    notes VARCHAR NOT NULL,
    photo_hashes JSON NOT NULL,
    voided BOOLEAN NOT NULL,
    void_reason VARCHAR,
    CONSTRAINT pk_find PRIMARY KEY (id),
    CONSTRAINT uq_find_site_id_number UNIQUE (site_id, number),
    CONSTRAINT fk_find_site_id_site FOREIGN KEY(site_id) REFERENCES site (id),
    CONSTRAINT fk_find_season_id_season FOREIGN KEY(season_id) REFERENCES season (id),
    CONSTRAINT fk_find_trench_id_trench FOREIGN KEY(trench_id) REFERENCES trench (id),
    CONSTRAINT fk_find_unit_id_unit FOREIGN KEY(unit_id) REFERENCES unit (id),
    CONSTRAINT fk_find_spit_id_spit FOREIGN KEY(spit_id) REFERENCES spit (id),
    CONSTRAINT ck_find_category CHECK (category IN ('artifact', 'fossil', 'sample')),
    CONSTRAINT ck_find_recovery CHECK (recovery IN ('plotted', 'sieved', 'surface', 'core')),
    CONSTRAINT ck_find_position_source CHECK (position_source IN ('total_station', 'gnss', 'tape', 'none')),
    CONSTRAINT fk_find_shot_id_shot FOREIGN KEY(shot_id) REFERENCES shot (id),
    CONSTRAINT fk_find_gnss_fix_id_gnss_fix FOREIGN KEY(gnss_fix_id) REFERENCES gnss_fix (id)
);

CREATE INDEX ix_find_category ON find (category);

CREATE INDEX ix_find_found_at ON find (found_at);

CREATE INDEX ix_find_trench_id ON find (trench_id);

CREATE INDEX ix_find_unit_id ON find (unit_id);

CREATE TABLE level_point (
    id CHAR(32) NOT NULL,
    unit_id CHAR(32) NOT NULL,
    surface VARCHAR(32) NOT NULL,
    e DOUBLE NOT NULL,
    n DOUBLE NOT NULL,
    z DOUBLE NOT NULL,
    shot_id CHAR(32),
    CONSTRAINT pk_level_point PRIMARY KEY (id),
    CONSTRAINT fk_level_point_unit_id_unit FOREIGN KEY(unit_id) REFERENCES unit (id),
    CONSTRAINT ck_level_point_surface CHECK (surface IN ('top', 'bottom')),
    CONSTRAINT fk_level_point_shot_id_shot FOREIGN KEY(shot_id) REFERENCES shot (id)
);

CREATE INDEX ix_level_point_unit_id ON level_point (unit_id);

CREATE TABLE sample (
    id CHAR(32) NOT NULL,
    find_id CHAR(32) NOT NULL,
    purpose VARCHAR(32) NOT NULL,
    volume_l DOUBLE,
    mass_g DOUBLE,
    container VARCHAR NOT NULL,
    oriented BOOLEAN NOT NULL,
    top_z DOUBLE,
    bottom_z DOUBLE,
    CONSTRAINT pk_sample PRIMARY KEY (id),
    CONSTRAINT uq_sample_find_id UNIQUE (find_id),
    CONSTRAINT fk_sample_find_id_find FOREIGN KEY(find_id) REFERENCES find (id),
    CONSTRAINT ck_sample_purpose CHECK (purpose IN ('radiocarbon', 'tephra', 'micromorphology', 'pollen', 'phytolith', 'bulk_flotation', 'luminescence'))
);

CREATE TABLE local_setting (
    key VARCHAR NOT NULL PRIMARY KEY,
    value VARCHAR NOT NULL
);
"""


def apply(conn: Connection) -> None:
    for statement in DDL.split(";\n"):
        if statement.strip():
            conn.exec_driver_sql(statement)
