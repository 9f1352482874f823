//! Charts (plotters, SVG or PNG) and the self-contained HTML monthly review report.
//! Works on values handed to it; never opens the database.
