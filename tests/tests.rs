mod rates_blocks;
pub mod rates_catalogue;
mod rates_limits;
mod report_html;
