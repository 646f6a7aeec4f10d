CREATE TABLE t(g, y, x);
INSERT INTO t VALUES ('north', 12.5, 1.0), ('north', 14.25, 2.0), ('north', 13.0, 2.5), ('south', 20.0, 1.5), ('south', 22.5, 3.0), ('south', 21.0, 2.0), ('east', 9.75, 0.5), ('east', 11.0, 1.0), ('east', 12.5, 2.5), ('east', 10.0, 1.25), (7, 3.0, 1.0), (7, 4.5, 2.0);
