-- The stem a stored map's files are named by when a download asks for no name: the photo's
-- file name without its extension, then "-orders" (see domain::FileStem). NULL when the photo
-- came without a file name and for maps stored before this column existed.
ALTER TABLE order_maps ADD COLUMN file_stem TEXT;
