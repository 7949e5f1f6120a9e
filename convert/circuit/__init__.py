"""Op-amp circuits: IEC 60063 series, the topology catalog, design and part search, tolerances,
netlists (read and write), nodal analysis, bills of materials and schematics."""
