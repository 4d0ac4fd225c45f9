// Shared by the fuzz targets: a small valid dataset to align other files with.
use std::path::Path;

pub fn dataset() -> flipmend::data::Dataset {
    let text = "id,x,label\nr0,1,a\nr1,2,b\nr2,3,c\n";
    flipmend::data::Dataset::from_reader(
        text.as_bytes(),
        Path::new("d.csv"),
        None,
        &Default::default(),
    )
    .unwrap()
}
