//! String attributes, the way every signfold file writes them (scalar variable-length
//! UTF-8).

use anyhow::{Result, anyhow};

/// Write a variable-length UTF-8 string attribute.
pub fn write_str_attr(loc: &hdf5::Location, name: &str, value: &str) -> Result<()> {
    let v: hdf5::types::VarLenUnicode = value
        .parse()
        .map_err(|e| anyhow!("attribute {name}: {e:?}"))?;
    loc.new_attr::<hdf5::types::VarLenUnicode>()
        .create(name)?
        .write_scalar(&v)?;
    Ok(())
}

/// Read a string attribute written by [`write_str_attr`].
pub fn read_str_attr(loc: &hdf5::Location, name: &str) -> Result<String> {
    let v: hdf5::types::VarLenUnicode = loc.attr(name)?.read_scalar()?;
    Ok(v.as_str().to_string())
}
