//! The plant configuration file (TOML), validated once into a [`Config`].
