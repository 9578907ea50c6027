//! USBTMC instruments (USB Test and Measurement Class 1.0) through the Linux `usbtmc` driver:
//! the kernel speaks the class's bulk transfers and offers each instrument as a character
//! device, `/dev/usbtmcN`, where one write is one message (EOM set) and one read returns
//! the instrument's response. Which N is which instrument shows in sysfs:
//! `class/usbmisc/usbtmcN/device` is the USB interface (`bInterfaceNumber`), its parent the
//! device (`idVendor`, `idProduct`, `serial`), as the driver registers them (Linux
//! drivers/usb/class/usbtmc.c and the USB core's sysfs attributes).
//!
//! The sysfs and /dev roots are parameters so tests can lay out a fake tree.

use super::address::UsbtmcId;
use super::Stream;
use std::io;
use std::path::{Path, PathBuf};

/// Where the device tree and the device nodes are.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SysfsRoots {
    /// The sysfs mount (`/sys`).
    pub sysfs: PathBuf,
    /// The device nodes' directory (`/dev`).
    pub dev: PathBuf,
}

impl SysfsRoots {
    /// The running system's.
    pub fn system() -> Self {
        SysfsRoots {
            sysfs: PathBuf::from("/sys"),
            dev: PathBuf::from("/dev"),
        }
    }
}

fn hex_attribute(dir: &Path, name: &str) -> Option<u16> {
    let text = std::fs::read_to_string(dir.join(name)).ok()?;
    u16::from_str_radix(text.trim(), 16).ok()
}

/// The device node of the usbtmc instrument `id` names.
pub fn find(roots: &SysfsRoots, id: &UsbtmcId) -> io::Result<PathBuf> {
    let class = roots.sysfs.join("class/usbmisc");
    let entries = std::fs::read_dir(&class).map_err(|e| {
        io::Error::new(
            e.kind(),
            format!(
                "{}: {e} (is the usbtmc driver loaded? `modprobe usbtmc`)",
                class.display()
            ),
        )
    })?;
    let mut seen = Vec::new();
    let mut names: Vec<String> = entries
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with("usbtmc"))
        .collect();
    names.sort();
    for name in names {
        let Ok(interface) = std::fs::canonicalize(class.join(&name).join("device")) else {
            continue;
        };
        let Some(device) = interface.parent() else {
            continue;
        };
        let vendor = hex_attribute(device, "idVendor");
        let product = hex_attribute(device, "idProduct");
        let serial = std::fs::read_to_string(device.join("serial"))
            .map(|s| s.trim().to_string())
            .unwrap_or_default();
        let number = hex_attribute(&interface, "bInterfaceNumber");
        seen.push(format!(
            "{name}: 0x{:04X}::0x{:04X}::{serial}",
            vendor.unwrap_or(0),
            product.unwrap_or(0)
        ));
        if vendor == Some(id.vendor)
            && product == Some(id.product)
            && serial == id.serial
            && id.interface.is_none_or(|i| number == Some(u16::from(i)))
        {
            return Ok(roots.dev.join(name));
        }
    }
    Err(io::Error::new(
        io::ErrorKind::NotFound,
        format!(
            "no usbtmc device with vendor 0x{:04X}, product 0x{:04X} and serial `{}`{} (found: {})",
            id.vendor,
            id.product,
            id.serial,
            id.interface
                .map_or(String::new(), |i| format!(" on interface {i}")),
            if seen.is_empty() {
                "none".to_string()
            } else {
                seen.join("; ")
            }
        ),
    ))
}

/// Opens the instrument's character device for reading and writing.
pub async fn open(roots: &SysfsRoots, id: &UsbtmcId) -> io::Result<Box<dyn Stream>> {
    let path = find(roots, id)?;
    let file = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        .open(&path)
        .map_err(|e| io::Error::new(e.kind(), format!("{}: {e}", path.display())))?;
    Ok(Box::new(tokio::fs::File::from_std(file)))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A fake sysfs with two instruments laid out as the kernel does: the class entry's
    /// `device` link points at the interface, whose parent holds the device's attributes.
    fn fake_tree(root: &Path) -> SysfsRoots {
        let sysfs = root.join("sys");
        let dev = root.join("dev");
        std::fs::create_dir_all(sysfs.join("class/usbmisc")).expect("class");
        std::fs::create_dir_all(&dev).expect("dev");
        for (n, vendor, product, serial, interface) in [
            (0, "4b1d", "0203", "OTHER1", "00"),
            (1, "7e57", "5678", "SN42", "00"),
            (2, "7e57", "5678", "SN42", "01"),
        ] {
            let device = sysfs.join(format!("devices/usb1/1-{n}"));
            let iface = device.join(format!("1-{n}:1.{interface}"));
            std::fs::create_dir_all(&iface).expect("interface");
            std::fs::write(device.join("idVendor"), format!("{vendor}\n")).expect("vendor");
            std::fs::write(device.join("idProduct"), format!("{product}\n")).expect("product");
            std::fs::write(device.join("serial"), format!("{serial}\n")).expect("serial");
            std::fs::write(iface.join("bInterfaceNumber"), format!("{interface}\n")).expect("if");
            let entry = sysfs.join(format!("class/usbmisc/usbtmc{n}"));
            std::fs::create_dir_all(&entry).expect("entry");
            std::os::unix::fs::symlink(&iface, entry.join("device")).expect("link");
            std::fs::write(dev.join(format!("usbtmc{n}")), b"").expect("node");
        }
        SysfsRoots { sysfs, dev }
    }

    #[test]
    fn finds_the_device_by_vendor_product_serial_and_interface() {
        let dir = tempfile::tempdir().expect("tempdir");
        let roots = fake_tree(dir.path());
        let mut id = UsbtmcId {
            vendor: 0x7e57,
            product: 0x5678,
            serial: "SN42".into(),
            interface: None,
        };
        assert_eq!(find(&roots, &id).expect("found"), roots.dev.join("usbtmc1"));
        id.interface = Some(1);
        assert_eq!(find(&roots, &id).expect("found"), roots.dev.join("usbtmc2"));
        id.serial = "SN43".into();
        let e = find(&roots, &id).expect_err("no such serial");
        assert!(e.to_string().contains("serial `SN43`"), "{e}");
        assert!(
            e.to_string().contains("usbtmc1: 0x7E57::0x5678::SN42"),
            "{e}"
        );
        let none = SysfsRoots {
            sysfs: dir.path().join("nothing"),
            dev: dir.path().into(),
        };
        assert!(find(&none, &id)
            .expect_err("no class")
            .to_string()
            .contains("modprobe usbtmc"));
    }

    #[tokio::test]
    async fn writes_and_reads_go_to_the_device_node() {
        use tokio::io::{AsyncReadExt, AsyncWriteExt};
        let dir = tempfile::tempdir().expect("tempdir");
        let roots = fake_tree(dir.path());
        let id = UsbtmcId {
            vendor: 0x7e57,
            product: 0x5678,
            serial: "SN42".into(),
            interface: Some(0),
        };
        let mut stream = open(&roots, &id).await.expect("open");
        stream.write_all(b"*IDN?\n").await.expect("write");
        stream.flush().await.expect("flush");
        drop(stream);
        // A plain file stands in for the node: what was written is there, one message.
        let mut again = open(&roots, &id).await.expect("open");
        let mut back = String::new();
        again.read_to_string(&mut back).await.expect("read");
        assert_eq!(back, "*IDN?\n");
    }
}
