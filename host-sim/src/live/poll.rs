//! The requests of one poll: the tags' registers grouped so that the
//! contiguous registers of one unit and table are read in one request.

use crate::plant::{PlcPoint, PlcTable};

/// Most registers one read request asks for (the protocol's limit).
pub const MAX_READ: u16 = 125;

/// One read request and the tags it serves.
#[derive(Clone, Debug, PartialEq)]
pub struct Group {
    /// Unit id.
    pub unit_id: u8,
    /// Table.
    pub table: PlcTable,
    /// First register.
    pub start: u16,
    /// Registers read.
    pub count: u16,
    /// The tags it serves: index into the points, offset of the tag's
    /// first register from `start`.
    pub members: Vec<(usize, u16)>,
}

impl Group {
    /// The tags' names, for warnings.
    pub fn names(&self, points: &[(String, PlcPoint)]) -> String {
        let names: Vec<&str> = self
            .members
            .iter()
            .filter_map(|(i, _)| points.get(*i).map(|(t, _)| t.as_str()))
            .collect();
        names.join(", ")
    }
}

fn table_order(t: PlcTable) -> u8 {
    match t {
        PlcTable::Holding => 0,
        PlcTable::Input => 1,
    }
}

/// The requests for `points`: sorted by unit, table and address; a tag
/// joins the request before it when its registers start at or before that
/// request's end (contiguous or overlapping) and the request stays within
/// [`MAX_READ`]. Registers between tags are never read (a PLC may refuse
/// an address it does not map).
pub fn plan(points: &[(String, PlcPoint)]) -> Vec<Group> {
    let mut order: Vec<usize> = (0..points.len()).collect();
    order.sort_by_key(|&i| {
        let p = &points[i].1;
        (p.unit_id, table_order(p.table), p.address, i)
    });
    let mut groups: Vec<Group> = Vec::new();
    for i in order {
        let p = &points[i].1;
        let end = u32::from(p.address) + u32::from(p.kind.width());
        if let Some(g) = groups.last_mut() {
            let g_end = u32::from(g.start) + u32::from(g.count);
            let joined = end.max(g_end) - u32::from(g.start);
            if g.unit_id == p.unit_id
                && g.table == p.table
                && u32::from(p.address) <= g_end
                && joined <= u32::from(MAX_READ)
            {
                g.count = joined as u16;
                g.members.push((i, p.address - g.start));
                continue;
            }
        }
        groups.push(Group {
            unit_id: p.unit_id,
            table: p.table,
            start: p.address,
            count: p.kind.width(),
            members: vec![(i, 0)],
        });
    }
    groups
}

#[cfg(test)]
mod tests {
    //! Expected requests worked out by hand from the addresses; the limit
    //! of 125 registers per read is the Modbus application protocol's
    //! (functions 03 and 04: quantity 1 to 125).
    use super::*;
    use crate::plant::PlcType;
    use holdup_kernel::modbus::WordOrder;

    fn pt(
        tag: &str,
        unit_id: u8,
        table: PlcTable,
        address: u16,
        kind: PlcType,
    ) -> (String, PlcPoint) {
        let p = PlcPoint {
            unit_id,
            table,
            address,
            kind,
            word_order: WordOrder::HighFirst,
            scale: 1.0,
            offset: 0.0,
        };
        (tag.to_string(), p)
    }

    #[test]
    fn contiguous_registers_of_one_unit_and_table_are_one_request() {
        use PlcTable::{Holding as H, Input as In};
        use PlcType::{F32, I16, U16};
        let points = vec![
            pt("B", 1, H, 2, F32),
            pt("A", 1, H, 0, F32),
            pt("C", 1, H, 4, I16),
            pt("gap", 1, H, 10, U16),
            pt("in", 1, In, 5, F32),
            pt("other unit", 2, H, 0, F32),
        ];
        let g = plan(&points);
        assert_eq!(g.len(), 4, "{g:?}");
        assert_eq!((g[0].start, g[0].count), (0, 5));
        assert_eq!(g[0].members, vec![(1, 0), (0, 2), (2, 4)]);
        assert_eq!(
            (g[1].start, g[1].count, g[1].members.clone()),
            (10, 1, vec![(3, 0)])
        );
        assert_eq!((g[2].unit_id, g[2].table, g[2].start), (1, In, 5));
        assert_eq!((g[3].unit_id, g[3].start), (2, 0));
        assert_eq!(g[0].names(&points), "A, B, C");
    }

    #[test]
    fn a_request_never_exceeds_the_protocol_limit() {
        let points: Vec<_> = (0..70u16)
            .map(|k| pt(&format!("T{k}"), 1, PlcTable::Input, 2 * k, PlcType::F32))
            .collect();
        let g = plan(&points);
        assert_eq!(g.len(), 2);
        assert_eq!((g[0].start, g[0].count), (0, 124));
        assert_eq!((g[1].start, g[1].count), (124, 16));
    }
}
